// Maximisation of a function of one variable on a closed interval: a coarse
// grid to find the right basin (a REML profile can have more than one local
// maximum), then Brent's safeguarded golden-section and parabolic search
// (Brent 1973, Algorithms for Minimization without Derivatives, ch. 5) inside
// the grid cell pair around the best grid point. The end points are grid
// points, so a maximum on the boundary is found exactly.
#pragma once

#include <functional>

namespace tamis::detail {

struct IntervalMaximum {
  double x = 0.0;
  double value = 0.0;
  int evaluations = 0;
  bool at_lower = false;   // x is the lower end exactly
  bool at_upper = false;   // x is the upper end exactly
  bool converged = true;   // Brent's bracket shrank to the tolerance
};

// `absolute_tolerance` bounds the uncertainty in x together with a relative
// part of sqrt(machine epsilon) * |x|, the best a search on function values
// can do near a smooth maximum. Among equal values the lower end wins, then
// the interior point, then the upper end. A non-finite value counts as -inf.
IntervalMaximum maximise_on_interval(const std::function<double(double)>& function, double lower, double upper,
                                     double absolute_tolerance);

}  // namespace tamis::detail
