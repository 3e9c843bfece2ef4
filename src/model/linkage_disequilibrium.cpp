#include "tamis/linkage_disequilibrium.hpp"

#include <algorithm>
#include <cassert>
#include <cmath>
#include <limits>

namespace tamis {

namespace {

double mean_of(const std::vector<double>& values) {
  double sum = 0.0;
  for (double value : values) sum += value;
  return sum / static_cast<double>(values.size());
}

// Compared exactly: a constant vector's mean need not equal its value to the
// last bit (0.3 summed n times), and centring would then leave rounding noise
// that looks like variation.
bool is_constant(const std::vector<double>& values) {
  const auto [lowest, highest] = std::minmax_element(values.begin(), values.end());
  return *lowest == *highest;
}

}  // namespace

bool impute_missing_with_mean(std::vector<double>& dosages) {
  double sum = 0.0;
  std::size_t called = 0;
  for (double dosage : dosages) {
    if (std::isnan(dosage)) continue;
    sum += dosage;
    ++called;
  }
  if (called == 0) return false;
  const double fill = sum / static_cast<double>(called);
  for (double& dosage : dosages) {
    if (std::isnan(dosage)) dosage = fill;
  }
  return true;
}

double dosage_r_squared(const std::vector<double>& a, const std::vector<double>& b) {
  assert(a.size() == b.size());
  if (a.empty() || is_constant(a) || is_constant(b)) return std::numeric_limits<double>::quiet_NaN();
  const double mean_a = mean_of(a), mean_b = mean_of(b);
  double cross = 0.0, squares_a = 0.0, squares_b = 0.0;
  for (std::size_t sample_idx = 0; sample_idx < a.size(); ++sample_idx) {
    const double centred_a = a[sample_idx] - mean_a;
    const double centred_b = b[sample_idx] - mean_b;
    cross += centred_a * centred_b;
    squares_a += centred_a * centred_a;
    squares_b += centred_b * centred_b;
  }
  // Rounding can carry a perfect correlation a hair past 1.
  return std::min(1.0, cross / squares_a * (cross / squares_b));
}

}  // namespace tamis
