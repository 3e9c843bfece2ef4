// Figures of a calibration test on null data: the genomic inflation factor
// and the exact binomial bounds on the count of p-values below a level.
#pragma once

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <utility>
#include <vector>

namespace tamis::testing {

// Genomic control: median(T) / 0.454936, the median of chi2(1) (Devlin &
// Roeder 1999, Biometrics 55:997-1004).
inline double lambda_gc(std::vector<double> chisq) {
  if (chisq.empty()) return 0.0;
  std::sort(chisq.begin(), chisq.end());
  const std::size_t n = chisq.size();
  const double median = n % 2 ? chisq[n / 2] : 0.5 * (chisq[n / 2 - 1] + chisq[n / 2]);
  return median / 0.454936;
}

// The equal-tailed central interval [lo, hi] of X ~ Binomial(n, p) that
// holds 1 - 2 * tail of its mass: lo is the smallest x with P(X <= x) >= tail
// and hi the smallest x with P(X <= x) >= 1 - tail, so P(X < lo) < tail and
// P(X > hi) <= tail. These are R's qbinom(tail, n, p) and
// qbinom(1 - tail, n, p) (R 4.2.2 `stats`, whose quantile is the smallest x
// with F(x) >= q). Exact, not a normal approximation: every term is the
// binomial probability C(n, x) p^x (1 - p)^(n - x) (the textbook formula,
// e.g. Feller 1968, An Introduction to Probability Theory and Its
// Applications I, 3rd ed., section VI.2), taken in log space through
// lgamma, and each tail is summed from its far end, smallest terms first,
// so that the upper tail is not 1 minus a number close to 1.
inline std::pair<std::size_t, std::size_t> binomial_bounds(std::size_t n, double p, double tail = 0.0005) {
  std::vector<double> probability(n + 1);
  const double log_n_factorial = std::lgamma(n + 1.0);
  for (std::size_t x = 0; x <= n; ++x) {
    const double count = static_cast<double>(x);
    probability[x] = std::exp(log_n_factorial - std::lgamma(count + 1.0) - std::lgamma(n - count + 1.0) +
                              count * std::log(p) + (n - count) * std::log1p(-p));
  }
  std::size_t lo = 0;
  double at_or_below = probability[0];
  while (at_or_below < tail) at_or_below += probability[++lo];
  // hi: the largest x with P(X >= x) > tail is the smallest with P(X > x) <= tail.
  std::size_t hi = n;
  double at_or_above = probability[n];
  while (at_or_above <= tail) at_or_above += probability[--hi];
  return {lo, hi};
}

}  // namespace tamis::testing
