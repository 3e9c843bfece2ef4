// Tail probabilities in log space.
//
// chi-square(1):  P(X > s) = erfc(sqrt(s / 2)). std::erfc is used while its
// value is far above underflow; beyond x = 20 the asymptotic expansion of
// ln erfc(x) (Abramowitz & Stegun 7.1.23) is summed, which at x >= 20 reaches
// double precision after a handful of terms.
//
// Student's t:  P(|T| > |t|) = I_{df/(df+t^2)}(df/2, 1/2), with the
// regularized incomplete beta evaluated in log space by its continued fraction
// (modified Lentz; Numerical Recipes 6.4) and log B(a, b) from the Stirling
// correction when an argument is large (as R's lbeta does).
#include "tamis/distributions.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <vector>
#include <stdexcept>

namespace tamis {
namespace {

constexpr double kLogSqrtPi = 0.57236494292470008707;    // ln(sqrt(pi))
constexpr double kLogSqrt2Pi = 0.91893853320467274178;   // ln(sqrt(2 pi))
constexpr double kLn10 = 2.30258509299404568402;

// ln erfc(x) for x >= 20 from the asymptotic series
// erfc(x) = exp(-x^2) / (x sqrt(pi)) * (1 + sum_k (-1)^k (2k-1)!! / (2x^2)^k).
// `half_stat` is x^2, passed exactly.
double log_erfc_asymptotic(double half_stat) {
  const double x = std::sqrt(half_stat);
  const double inv = 1.0 / (2.0 * half_stat);
  double term = 1.0;
  double sum = 0.0;
  for (int k = 1; k < 60; ++k) {
    const double next = -term * (2.0 * k - 1.0) * inv;
    if (std::fabs(next) >= std::fabs(term)) break;  // series starts to diverge
    term = next;
    sum += term;
    if (std::fabs(term) < 1e-18) break;
  }
  return -half_stat - std::log(x) - kLogSqrtPi + std::log1p(sum);
}

// Stirling correction lgamma(x) - [(x - 1/2) ln x - x + ln sqrt(2 pi)], x >= 10.
double lgamma_correction(double x) {
  const double inv = 1.0 / x;
  const double inv2 = inv * inv;
  // Bernoulli-number coefficients B_2k / (2k (2k - 1)), highest first.
  const double c[] = {-3617.0 / 122400.0, 1.0 / 156.0, -691.0 / 360360.0, 1.0 / 1188.0,
                      -1.0 / 1680.0,      1.0 / 1260.0, -1.0 / 360.0,     1.0 / 12.0};
  double series = c[0];
  for (int k = 1; k < 8; ++k) series = series * inv2 + c[k];
  return series * inv;
}

double log_beta(double a, double b) {
  const double p = std::fmin(a, b);
  const double q = std::fmax(a, b);
  if (p >= 10.0) {
    const double corr = lgamma_correction(p) + lgamma_correction(q) - lgamma_correction(p + q);
    return -0.5 * std::log(q) + kLogSqrt2Pi + corr + (p - 0.5) * std::log(p / (p + q)) +
           q * std::log1p(-p / (p + q));
  }
  if (q >= 10.0) {
    const double corr = lgamma_correction(q) - lgamma_correction(p + q);
    return std::lgamma(p) + corr + p - p * std::log(p + q) +
           (q - 0.5) * std::log1p(-p / (p + q));
  }
  return std::lgamma(p) + std::lgamma(q) - std::lgamma(p + q);
}

// Continued fraction for I_x(a, b) (without the prefactor), modified Lentz.
double beta_continued_fraction(double x, double a, double b) {
  constexpr double tiny = 1e-300;
  constexpr double eps = 4.5e-16;  // two ulps of 1: a smaller target would never be met
  const double qab = a + b;
  const double qap = a + 1.0;
  const double qam = a - 1.0;
  double c = 1.0;
  double d = 1.0 - qab * x / qap;
  if (std::fabs(d) < tiny) d = tiny;
  d = 1.0 / d;
  double h = d;
  for (int m = 1; m <= 100000; ++m) {
    const double m2 = 2.0 * m;
    double aa = m * (b - m) * x / ((qam + m2) * (a + m2));
    d = 1.0 + aa * d;
    if (std::fabs(d) < tiny) d = tiny;
    c = 1.0 + aa / c;
    if (std::fabs(c) < tiny) c = tiny;
    d = 1.0 / d;
    h *= d * c;
    aa = -(a + m) * (qab + m) * x / ((a + m2) * (qap + m2));
    d = 1.0 + aa * d;
    if (std::fabs(d) < tiny) d = tiny;
    c = 1.0 + aa / c;
    if (std::fabs(c) < tiny) c = tiny;
    d = 1.0 / d;
    const double del = d * c;
    h *= del;
    if (std::fabs(del - 1.0) < eps) break;
  }
  return h;
}

// ln I_x(a, b) given x, y = 1 - x and their logs (each computed accurately by
// the caller, so that neither x near 0 nor x near 1 loses precision).
double log_ibeta(double x, double y, double log_x, double log_y, double a, double b) {
  if (log_x == -std::numeric_limits<double>::infinity()) return log_x;
  if (log_y == -std::numeric_limits<double>::infinity()) return 0.0;
  if (x > (a + 1.0) / (a + b + 2.0)) {
    // Symmetry: I_x(a, b) = 1 - I_{1-x}(b, a); the continued fraction converges fast there.
    const double log_other = log_ibeta(y, x, log_y, log_x, b, a);
    return std::log1p(-std::exp(log_other));
  }
  const double log_front = a * log_x + b * log_y - log_beta(a, b) - std::log(a);
  return log_front + std::log(beta_continued_fraction(x, a, b));
}

}  // namespace

double log_chisq1_upper_tail(double stat) {
  if (!(stat > 0.0)) return 0.0;  // also maps NaN to p = 1 rather than propagating it
  if (std::isinf(stat)) return -std::numeric_limits<double>::max();
  const double half_stat = stat / 2.0;
  const double x = std::sqrt(half_stat);
  if (x < 0.5) return std::log1p(-std::erf(x));  // erfc near 1: keep the small log exact
  if (x < 20.0) return std::log(std::erfc(x));
  return log_erfc_asymptotic(half_stat);
}

double log_student_t_two_sided(double t, double df) {
  if (!(df > 0.0)) throw std::domain_error("log_student_t_two_sided: df must be positive");
  const double abs_t = std::fabs(t);
  if (abs_t == 0.0) return 0.0;
  if (std::isinf(abs_t)) return -std::numeric_limits<double>::max();
  // x = df / (df + t^2), y = t^2 / (df + t^2) and their logs, through the
  // smaller of t^2/df and df/t^2 so that neither cancels nor overflows.
  double x, y, log_x, log_y;
  if (abs_t <= std::sqrt(df)) {
    const double q = abs_t * (abs_t / df);  // t^2 / df <= 1
    x = 1.0 / (1.0 + q);
    y = q / (1.0 + q);
    log_x = -std::log1p(q);
    log_y = std::log(q) - std::log1p(q);
  } else {
    const double ratio = (df / abs_t) / abs_t;  // df / t^2 < 1, may underflow for huge t
    const double log_ratio =
        ratio > 1e-300 ? std::log(ratio) : std::log(df) - 2.0 * std::log(abs_t);
    x = ratio / (1.0 + ratio);
    y = 1.0 / (1.0 + ratio);
    log_x = log_ratio - std::log1p(ratio);
    log_y = -std::log1p(ratio);
  }
  return log_ibeta(x, y, log_x, log_y, df / 2.0, 0.5);
}

double log_chisq_upper_tail(double stat, int df) {
  if (df < 1) throw std::domain_error("log_chisq_upper_tail: df must be a positive integer");
  if (df == 1) return log_chisq1_upper_tail(stat);
  if (!(stat > 0.0)) return 0.0;
  if (std::isinf(stat)) return -std::numeric_limits<double>::max();
  // Q(a + 1, x) = Q(a, x) + x^a e^-x / Gamma(a + 1), from a = 1 (Q = e^-x)
  // for even df or a = 1/2 (the chi-square(1) tail) for odd df; x = stat / 2.
  // The terms are summed as logs, largest last, by log-sum-exp.
  const double x = stat / 2.0;
  const double log_x = std::log(x);
  const bool even = df % 2 == 0;
  std::vector<double> log_terms;
  log_terms.push_back(even ? -x : log_chisq1_upper_tail(stat));
  for (double a = even ? 1.0 : 0.5; a + 1.0 <= 0.5 * df; a += 1.0) {
    log_terms.push_back(a * log_x - x - std::lgamma(a + 1.0));
  }
  const double largest = *std::max_element(log_terms.begin(), log_terms.end());
  double sum = 0.0;
  for (const double log_term : log_terms) sum += std::exp(log_term - largest);
  return std::fmin(0.0, largest + std::log(sum));
}

double log_f_upper_tail(double f, double df1, double df2) {
  if (!(df1 > 0.0) || !(df2 > 0.0)) throw std::domain_error("log_f_upper_tail: df must be positive");
  if (!(f > 0.0)) return 0.0;
  if (std::isinf(f)) return -std::numeric_limits<double>::max();
  // P(F > f) = I_x(df2/2, df1/2) at x = df2 / (df2 + df1 f); x and 1 - x
  // through q = df1 f / df2 or its inverse, so that neither cancels.
  const double q = df1 * f / df2;
  double x, y, log_x, log_y;
  if (q <= 1.0) {
    x = 1.0 / (1.0 + q);
    y = q / (1.0 + q);
    log_x = -std::log1p(q);
    log_y = std::log(q) - std::log1p(q);
  } else {
    const double ratio = 1.0 / q;
    x = ratio / (1.0 + ratio);
    y = 1.0 / (1.0 + ratio);
    log_x = std::log(ratio) - std::log1p(ratio);
    log_y = -std::log1p(ratio);
  }
  return log_ibeta(x, y, log_x, log_y, df2 / 2.0, df1 / 2.0);
}

double log_regularized_incomplete_beta(double x, double a, double b) {
  if (!(a > 0.0) || !(b > 0.0)) {
    throw std::domain_error("log_regularized_incomplete_beta: a and b must be positive");
  }
  if (x <= 0.0) return -std::numeric_limits<double>::infinity();
  if (x >= 1.0) return 0.0;
  return log_ibeta(x, 1.0 - x, std::log(x), std::log1p(-x), a, b);
}

double chisq1_upper_quantile(double p) {
  if (!(p > 0.0 && p < 1.0)) throw std::domain_error("chisq1_upper_quantile: p must be in (0, 1)");
  const double target = std::log(p);
  double lo = 0.0;
  double hi = 1.0;
  while (log_chisq1_upper_tail(hi) > target) {
    lo = hi;
    hi *= 2.0;
  }
  double q = 0.5 * (lo + hi);
  for (int iteration = 0; iteration < 500; ++iteration) {
    const double log_tail = log_chisq1_upper_tail(q);
    const double f = log_tail - target;
    if (f == 0.0) break;
    if (f > 0.0) lo = q; else hi = q;
    // d/dq ln P(q) = -density(q) / P(q), density = exp(-q/2) / sqrt(2 pi q).
    const double slope = -std::exp(-q / 2.0 - 0.5 * std::log(q) - kLogSqrt2Pi - log_tail);
    double next = q - f / slope;
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (std::fabs(next - q) <= 4e-16 * q) {
      q = next;
      break;
    }
    q = next;
  }
  return q;
}

double neg_log10_from_log(double log_p) {
  if (log_p == 0.0) return 0.0;  // never "-0"
  return -log_p / kLn10;
}

}  // namespace tamis
