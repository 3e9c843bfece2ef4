// I_x(a, b) from its continued fraction (evaluated with the modified Lentz
// method), and the quantile by bisection on log x, since the band's lower
// quantiles reach far below 1e-9 for genome-wide n.
#include "report/order_statistics.hpp"

#include <cassert>
#include <cmath>
#include <utility>

namespace tamis::report {

namespace {

constexpr int max_fraction_terms = 200000;
constexpr double fraction_tolerance = 1e-15;
constexpr double tiny_denominator = 1e-300;  // keeps Lentz's ratios finite

constexpr double stirling_from = 1e4;  // the series' error is far below 1e-30 from here

// ln Gamma(x) - [(x - 1/2) ln x - x + ln(2 pi) / 2], from Stirling's series.
double stirling_correction(double x) {
  const double inverse = 1.0 / x, inverse_squared = inverse * inverse;
  return inverse * (1.0 / 12 - inverse_squared * (1.0 / 360 - inverse_squared / 1260));
}

// ln B(a, b). For a large b, lgamma(b) - lgamma(a + b) subtracts two numbers
// near b ln b and would lose about log10(b ln b) digits, so that difference
// is taken from Stirling's series in closed form instead.
double log_beta_function(double a, double b) {
  if (a > b) std::swap(a, b);
  if (b < stirling_from) return std::lgamma(a) + std::lgamma(b) - std::lgamma(a + b);
  const double gamma_ratio = -(b - 0.5) * std::log1p(a / b) - a * std::log(a + b) + a +
                             stirling_correction(b) - stirling_correction(a + b);
  return std::lgamma(a) + gamma_ratio;
}

// The continued fraction 1 / (1 + d1 / (1 + d2 / (1 + ...))) with
// d(2m+1) = -(a+m)(a+b+m)x / ((a+2m)(a+2m+1)) and
// d(2m)   = m(b-m)x / ((a+2m-1)(a+2m)); it converges fast for x < (a+1)/(a+b+2).
double beta_continued_fraction(double x, double a, double b) {
  auto guarded = [](double value) { return std::fabs(value) < tiny_denominator ? tiny_denominator : value; };
  double numerator_ratio = 1.0;
  double denominator_ratio = 1.0 / guarded(1.0 - (a + b) * x / (a + 1.0));
  double fraction = denominator_ratio;
  for (int term = 1; term <= max_fraction_terms; ++term) {
    const double m = term;
    const double even_step = m * (b - m) * x / ((a + 2.0 * m - 1.0) * (a + 2.0 * m));
    denominator_ratio = 1.0 / guarded(1.0 + even_step * denominator_ratio);
    numerator_ratio = guarded(1.0 + even_step / numerator_ratio);
    fraction *= denominator_ratio * numerator_ratio;

    const double odd_step = -(a + m) * (a + b + m) * x / ((a + 2.0 * m) * (a + 2.0 * m + 1.0));
    denominator_ratio = 1.0 / guarded(1.0 + odd_step * denominator_ratio);
    numerator_ratio = guarded(1.0 + odd_step / numerator_ratio);
    const double change = denominator_ratio * numerator_ratio;
    fraction *= change;
    if (std::fabs(change - 1.0) < fraction_tolerance) break;
  }
  return fraction;
}

}  // namespace

double regularized_incomplete_beta(double x, double a, double b) {
  assert(a > 0.0 && b > 0.0 && x >= 0.0 && x <= 1.0);
  if (x <= 0.0) return 0.0;
  if (x >= 1.0) return 1.0;
  const bool use_symmetry = x > (a + 1.0) / (a + b + 2.0);
  const double xs = use_symmetry ? 1.0 - x : x;
  const double as = use_symmetry ? b : a;
  const double bs = use_symmetry ? a : b;
  const double log_front = as * std::log(xs) + bs * std::log1p(-xs) - std::log(as) - log_beta_function(as, bs);
  const double tail = std::exp(log_front) * beta_continued_fraction(xs, as, bs);
  return use_symmetry ? 1.0 - tail : tail;
}

double beta_quantile(double q, double a, double b) {
  assert(q > 0.0 && q < 1.0);
  // I_x is increasing in x, so bisect on log x between e^-745 (the smallest
  // double) and 1; 90 halvings shrink that range below 1e-24 in log x.
  double low = -745.0;
  double high = 0.0;
  for (int halving = 0; halving < 90; ++halving) {
    const double middle = 0.5 * (low + high);
    if (regularized_incomplete_beta(std::exp(middle), a, b) < q) {
      low = middle;
    } else {
      high = middle;
    }
  }
  return std::exp(0.5 * (low + high));
}

}  // namespace tamis::report
