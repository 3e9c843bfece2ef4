#include "relatedness/interval_maximiser.hpp"

#include <cfloat>
#include <cmath>
#include <vector>

namespace tamis::detail {
namespace {

// Grid points over the whole interval, ends included.
constexpr int kGridPoints = 11;
constexpr int kMaxBrentSteps = 200;
// (3 - sqrt 5) / 2: the golden-section fraction.
constexpr double kGoldenFraction = 0.38196601125010515;

double finite_or_lowest(double value) { return std::isfinite(value) ? value : -DBL_MAX; }

// Brent's minimiser of `cost` on [a, b]; returns the best point seen.
IntervalMaximum brent_minimise(const std::function<double(double)>& cost, double a, double b,
                               double absolute_tolerance) {
  const double relative_tolerance = std::sqrt(DBL_EPSILON);
  IntervalMaximum out;
  double x = a + kGoldenFraction * (b - a);
  double w = x, v = x;
  double fx = cost(x);
  ++out.evaluations;
  double fw = fx, fv = fx;
  double step = 0.0;       // the last step taken
  double older_step = 0.0; // the step before it: parabolic steps must shrink against it
  out.converged = false;
  for (int iteration = 0; iteration < kMaxBrentSteps; ++iteration) {
    const double middle = 0.5 * (a + b);
    const double tol1 = relative_tolerance * std::fabs(x) + absolute_tolerance;
    const double tol2 = 2.0 * tol1;
    if (std::fabs(x - middle) <= tol2 - 0.5 * (b - a)) {
      out.converged = true;
      break;
    }
    bool parabolic = false;
    if (std::fabs(older_step) > tol1) {
      // The vertex of the parabola through (v, fv), (w, fw), (x, fx), as x + p / q.
      double r = (x - w) * (fx - fv);
      double q = (x - v) * (fx - fw);
      double p = (x - v) * q - (x - w) * r;
      q = 2.0 * (q - r);
      if (q > 0.0) p = -p;
      q = std::fabs(q);
      const double limit = older_step;
      older_step = step;
      // Accept the vertex only inside the bracket and when the step is less
      // than half the one before last (so the search cannot stall).
      if (std::fabs(p) < std::fabs(0.5 * q * limit) && p > q * (a - x) && p < q * (b - x)) {
        step = p / q;
        const double trial = x + step;
        if (trial - a < tol2 || b - trial < tol2) step = x < middle ? tol1 : -tol1;
        parabolic = true;
      }
    }
    if (!parabolic) {
      older_step = x < middle ? b - x : a - x;
      step = kGoldenFraction * older_step;
    }
    const double u = std::fabs(step) >= tol1 ? x + step : x + (step > 0.0 ? tol1 : -tol1);
    const double fu = cost(u);
    ++out.evaluations;
    if (fu <= fx) {
      if (u < x) b = x; else a = x;
      v = w; fv = fw;
      w = x; fw = fx;
      x = u; fx = fu;
    } else {
      if (u < x) a = u; else b = u;
      if (fu <= fw || w == x) {
        v = w; fv = fw;
        w = u; fw = fu;
      } else if (fu <= fv || v == x || v == w) {
        v = u; fv = fu;
      }
    }
  }
  out.x = x;
  out.value = -fx;
  return out;
}

}  // namespace

IntervalMaximum maximise_on_interval(const std::function<double(double)>& function, double lower, double upper,
                                     double absolute_tolerance) {
  auto value_at = [&](double x) { return finite_or_lowest(function(x)); };
  std::vector<double> grid(kGridPoints), values(kGridPoints);
  int best = 0;
  for (int point = 0; point < kGridPoints; ++point) {
    grid[point] = point == kGridPoints - 1 ? upper : lower + (upper - lower) * point / (kGridPoints - 1);
    values[point] = value_at(grid[point]);
    if (values[point] > values[best]) best = point;
  }
  const double bracket_low = grid[best > 0 ? best - 1 : 0];
  const double bracket_high = grid[best < kGridPoints - 1 ? best + 1 : kGridPoints - 1];
  IntervalMaximum inner = brent_minimise([&](double x) { return -value_at(x); }, bracket_low, bracket_high,
                                         absolute_tolerance);
  inner.evaluations += kGridPoints;

  // An interior point within a few tolerances of an end is that end: the
  // search cannot tell them apart, and the boundary is the honest answer.
  auto snap = [&](double end) { return 4.0 * (absolute_tolerance + std::sqrt(DBL_EPSILON) * std::fabs(end)); };
  IntervalMaximum out = inner;
  if (inner.x - lower <= snap(lower)) {
    out.x = lower;
    out.value = values.front();
  } else if (upper - inner.x <= snap(upper)) {
    out.x = upper;
    out.value = values.back();
  }
  if (values.back() > out.value) {
    out.x = upper;
    out.value = values.back();
  }
  if (values.front() >= out.value) {
    out.x = lower;
    out.value = values.front();
  }
  out.at_lower = out.x == lower;
  out.at_upper = out.x == upper;
  return out;
}

}  // namespace tamis::detail
