// Upper tails of Q = sum_k lambda_k X_k, X_k independent chi-square(1).
//
// Four routes, each from its paper:
// - Davies (1980), Applied Statistics 29:323-333: the Gil-Pelaez inversion
//   P(Q < c) = 1/2 - (1/pi) int_0^inf Im[phi(u) e^{-iuc}] / u du summed by the
//   midpoint rule at u_k = (k + 1/2) Delta. Davies (1973, Biometrika
//   60:415-417) showed that the infinite sum errs by at most
//   P(Q < c - L) + P(Q > c + L), L = 2 pi / Delta; both tails are bounded here
//   by Chernoff's bound exp(K(t) - t y) at the saddlepoint. The sum is cut at
//   K terms with the truncation error bounded from |phi(u)| (the bound below).
//   Where that needs too many terms, phi is multiplied by the convergence
//   factor exp(-tau^2 u^2 / 2), i.e. Q + tau Z is inverted instead; the error
//   this makes is at most tau^2 / 2 sup|f'| (second-order Taylor expansion of
//   P(Q < c - tau Z) about c), with sup|f'| <= (1/pi) int_0^inf u |phi(u)| du.
//   Every bound is a true bound, so `reached` is reported as the paper means.
// - Kuonen (1999), Biometrika 86:929-935: the Lugannani-Rice saddlepoint
//   approximation, carried in log space.
// - Liu, Tang & Zhang (2009), CSDA 53:853-856: a chi-square matched on the
//   first four cumulants (for central chi-square(1) terms, c3^2 <= c2 c4 by
//   Cauchy-Schwarz, so the matched chi-square is central with l = c2^3 / c3^2
//   degrees of freedom).
// - The Bromwich integral P(Q > c) = (1/2 pi i) int M(s) e^{-sc} / s ds,
//   M(s) = E e^{sQ}, along a parabola through the saddlepoint, bent to the
//   right like the steepest-descent path and summed by the trapezoidal rule
//   (Weideman & Trefethen 2007, Math. Comp. 76:1341-1356, for parabolic
//   contours). Its integrand carries the factor exp(K(t) - tc) of the tail
//   itself, so the result keeps its relative accuracy far below 1e-300 and
//   for any number of terms; it is what the combination uses below p = 1e-3,
//   where Davies' absolute accuracy of 1e-9 no longer gives relative accuracy
//   1e-6 and the saddlepoint approximation errs by up to a few percent (the
//   far tail of one dominant chi-square(1) term, Daniels 1987, ISR 55:37-48).
#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <complex>
#include <limits>
#include <stdexcept>

#include "sets/mixture_cgf.hpp"
#include "tamis/distributions.hpp"
#include "tamis/set_tests.hpp"

namespace tamis {

using sets_detail::kept_eigenvalues;
using sets_detail::log_add;
using sets_detail::MixtureCgf;

namespace sets_detail {

std::vector<double> kept_eigenvalues(const std::vector<double>& eigenvalues) {
  double largest = 0.0;
  for (const double lambda : eigenvalues) {
    if (!std::isfinite(lambda)) throw std::invalid_argument("mixture tail: an eigenvalue is not finite");
    largest = std::max(largest, lambda);
  }
  std::vector<double> kept;
  for (const double lambda : eigenvalues)
    if (lambda > 0.0 && lambda >= 1e-12 * largest) kept.push_back(lambda);
  std::sort(kept.begin(), kept.end(), std::greater<double>());
  return kept;
}

double log_add(double a, double b) {
  if (a < b) std::swap(a, b);
  if (b == -std::numeric_limits<double>::infinity()) return a;
  return a + std::log1p(std::exp(b - a));
}

MixtureCgf::MixtureCgf(std::vector<double> lambdas, double normal_variance)
    : lambdas_(std::move(lambdas)), normal_variance_(normal_variance) {
  const double largest = lambdas_.front();
  gap_.reserve(lambdas_.size());
  for (const double lambda : lambdas_) {
    gap_.push_back((largest - lambda) / largest);
    mean_ += lambda;
  }
}

double MixtureCgf::cgf(double z) const {
  // ln d_k by log1p near d_k = 1 (t near 0), where d_k - 1 = (z - 1)(1 - r_k)
  // is exact enough; by log elsewhere, where d_k itself is.
  double sum = 0.0;
  for (std::size_t k = 0; k < lambdas_.size(); ++k) {
    const double dk = d(k, z);
    sum += dk < 0.5 ? std::log(dk) : std::log1p((z - 1.0) * (1.0 - gap_[k]));
  }
  const double t = t_of(z);
  return -0.5 * sum + 0.5 * normal_variance_ * t * t;
}

double MixtureCgf::derivative(double z) const {
  double sum = 0.0;
  for (std::size_t k = 0; k < lambdas_.size(); ++k) sum += lambdas_[k] / d(k, z);
  return sum + normal_variance_ * t_of(z);
}

double MixtureCgf::solve(double target) const {
  // K'(t(z)) falls from +inf (z -> 0) as z grows; Newton's method in y = ln z
  // inside a bracket that bisection keeps.
  const double largest = lambdas_.front();
  auto excess = [&](double y) { return derivative(std::exp(y)) - target; };
  double y_low, y_high;
  if (excess(0.0) < 0.0) {
    y_high = 0.0;
    // K'(t) >= lambda_1 / z + tau^2 t >= target for z <= lambda_1 / target.
    y_low = std::log(largest / target);
    while (excess(y_low) < 0.0) y_low -= 1.0;
  } else {
    y_low = 0.0;
    y_high = 1.0;
    while (excess(y_high) > 0.0 && y_high < 700.0) y_high = 2.0 * y_high + 1.0;
  }
  double y = 0.5 * (y_low + y_high);
  for (int iteration = 0; iteration < 200; ++iteration) {
    const double z = std::exp(y);
    double slope = 0.0;  // d K'/d z
    double value = -target + normal_variance_ * t_of(z);
    for (std::size_t k = 0; k < lambdas_.size(); ++k) {
      const double dk = d(k, z);
      value += lambdas_[k] / dk;
      slope -= lambdas_[k] * (1.0 - gap_[k]) / (dk * dk);
    }
    slope -= normal_variance_ / (2.0 * largest);
    if (value == 0.0) return z;
    if (value > 0.0) y_low = y; else y_high = y;
    double next = y - value / (slope * z);
    if (!(next > y_low && next < y_high)) next = 0.5 * (y_low + y_high);
    if (std::fabs(next - y) <= 1e-15 * std::max(1.0, std::fabs(y)) || y_high - y_low <= 1e-15 * std::max(1.0, std::fabs(y)))
      return std::exp(next);
    y = next;
  }
  return std::exp(y);
}

double MixtureCgf::log_chernoff_bound(double y) const {
  if (y == mean_) return 0.0;
  if (y <= 0.0 && normal_variance_ == 0.0) return -std::numeric_limits<double>::infinity();
  const double z = solve(y);
  return std::min(0.0, cgf(z) - t_of(z) * y);
}

}  // namespace sets_detail

namespace {

// The exact tail where p is below Davies' floor: the inversion, then the
// saddlepoint, then moment matching (defined with them, below).
MixtureTail tail_below_davies_floor(const std::vector<double>& lambdas, double q);

constexpr double kPi = 3.14159265358979323846;

// ---- Davies' inversion --------------------------------------------------------

// |phi(u)| = prod_k (1 + a_k u^2)^(-1/4), a_k = 4 lambda_k^2, falls at least
// as fast as u^(-s/2) beyond V for the s largest terms, since there
// (1 + a_k u^2) >= a_k u^2, while the other factors are at most their values
// at V. So for u >= V
//   |phi(u)| <= C_s(V) (u / V)^(-s/2),
//   C_s(V) = prod_{k > s} (1 + a_k V^2)^(-1/4) prod_{k <= s} (a_k V^2)^(-1/4).
// Returns ln|phi(V)| and, for the bound of an integral of |phi| against a
// power of u, the least over s >= s_min of ln C_s(V) + log_factor(s).
struct SplitBound {
  double log_abs_phi = 0.0;
  double least = std::numeric_limits<double>::infinity();
};
template <class LogFactor>
SplitBound split_bound(const std::vector<double>& lambdas, double v, std::size_t s_min, LogFactor log_factor) {
  const std::size_t m = lambdas.size();
  std::vector<double> log1p_term(m), log_term(m);
  double total_log1p = 0.0;
  for (std::size_t k = 0; k < m; ++k) {
    const double x = 4.0 * lambdas[k] * lambdas[k] * v * v;
    log1p_term[k] = std::log1p(x);
    log_term[k] = std::log(x);
    total_log1p += log1p_term[k];
  }
  SplitBound bound;
  bound.log_abs_phi = -0.25 * total_log1p;
  double prefix_log1p = 0.0, prefix_log = 0.0;
  for (std::size_t s = 1; s <= m; ++s) {
    prefix_log1p += log1p_term[s - 1];
    prefix_log += log_term[s - 1];
    if (s < s_min) continue;
    bound.least = std::min(bound.least, -0.25 * (total_log1p - prefix_log1p + prefix_log) + log_factor(s));
  }
  return bound;
}

// ln of a bound on (1/pi) int_V^inf |phi(u)| exp(-tau^2 u^2 / 2) / u du, the
// truncation error of the sum (its terms are that integrand at the midpoints
// and the integrand falls, so the terms beyond (K - 1/2) Delta = V sum to no
// more): integrating u^(-s/2 - 1) in split_bound gives C_s(V) 2 / (pi s).
// With the convergence factor, also
//   |phi(V)| (1/pi) int_V^inf exp(-tau^2 u^2 / 2) / u du = |phi(V)| E1(x) / (2 pi),
// x = tau^2 V^2 / 2, with E1(x) < exp(-x) ln(1 + 1/x).
double log_truncation_bound(const std::vector<double>& lambdas, double v, double tau2) {
  const SplitBound bound =
      split_bound(lambdas, v, 1, [](std::size_t s) { return std::log(2.0 / (kPi * static_cast<double>(s))); });
  if (!(tau2 > 0.0)) return bound.least;
  const double x = 0.5 * tau2 * v * v;
  return std::min(bound.least, bound.log_abs_phi - x + std::log(std::log1p(1.0 / x)) - std::log(2.0 * kPi));
}

// The smallest V (within a few percent) whose truncation bound is at most
// `log_allowance`; infinity if none below 1e300.
double truncation_point(const std::vector<double>& lambdas, double tau2, double log_allowance) {
  double high = 1.0 / lambdas.front();
  while (log_truncation_bound(lambdas, high, tau2) > log_allowance) {
    high *= 4.0;
    if (high > 1e300) return std::numeric_limits<double>::infinity();
  }
  double low = high / 4.0;
  for (int step = 0; step < 12; ++step) {
    const double middle = std::sqrt(low * high);
    (log_truncation_bound(lambdas, middle, tau2) > log_allowance ? low : high) = middle;
  }
  return high;
}

// The smallest L (within a few percent) with P(X < c - L) + P(X > c + L)
// below e^log_allowance by Chernoff's bounds, X = Q + tau Z.
double aliasing_span(const MixtureCgf& cgf, double c, double log_allowance) {
  auto log_bound = [&](double span) {
    const double upper = c + span > cgf.mean() ? cgf.log_chernoff_bound(c + span) : 0.0;
    const double lower = c - span < cgf.mean() ? cgf.log_chernoff_bound(c - span) : 0.0;
    return log_add(upper, lower);
  };
  double high = std::sqrt(2.0 * cgf.lambdas().front() * cgf.mean() + cgf.normal_variance());
  while (log_bound(high) > log_allowance) high *= 2.0;
  double low = high / 2.0;
  for (int step = 0; step < 8; ++step) {
    const double middle = 0.5 * (low + high);
    (log_bound(middle) > log_allowance ? low : high) = middle;
  }
  return high;
}

// An upper bound on sup |f'| for the density f of Q:
// (1/pi) int_0^inf u |phi(u)| du, finite with five or more terms. Summed by
// the trapezoidal rule in ln u (accurate to far better than the 10% margin
// added); below u0 the integrand is at most u, beyond the last node the tail
// is bounded as in log_truncation_bound with u |phi(u)| <= C u^(1 - s/2),
// s >= 5. Infinity where that fails.
double density_slope_bound(const std::vector<double>& lambdas) {
  const std::size_t m = lambdas.size();
  if (m < 5) return std::numeric_limits<double>::infinity();
  const double u0 = 1e-3 / lambdas.front();
  const double step = 0.05;
  auto log_abs_phi = [&](double u) {
    double sum = 0.0;
    for (const double lambda : lambdas) sum += std::log1p(4.0 * lambda * lambda * u * u);
    return -0.25 * sum;
  };
  auto tail_bound = [&](double u) {  // bound on int_u^inf w |phi(w)| dw = C_s(u) u^2 / (s/2 - 2)
    const SplitBound bound = split_bound(lambdas, u, 5, [&](std::size_t s) {
      return 2.0 * std::log(u) - std::log(0.5 * static_cast<double>(s) - 2.0);
    });
    return std::exp(bound.least);
  };
  double integral = 0.5 * u0 * u0;
  double log_u = std::log(u0);
  double previous = u0 * u0 * std::exp(log_abs_phi(u0));
  for (int node = 1; node <= 4000; ++node) {
    log_u += step;
    const double u = std::exp(log_u);
    const double value = u * u * std::exp(log_abs_phi(u));
    integral += 0.5 * step * (previous + value);
    previous = value;
    if (node % 20 == 0) {
      const double tail = tail_bound(u);
      if (tail < 1e-3 * integral) return 1.1 * (integral + tail) / kPi;
    }
  }
  return std::numeric_limits<double>::infinity();
}

// ln|phi(u)| = -1/4 sum_k ln(1 + x_k^2) and theta(u) = 1/2 sum_k atan(x_k),
// x_k = 2 lambda_k u, the characteristic function's modulus and argument
// (before the -u c of the point), from the product of the factors
// (1 + i x_k): one atan2 and one logarithm per node instead of one of each
// per eigenvalue. Each factor turns the product by less than pi / 2, so the
// argument's turns are counted where the product crosses the negative real
// axis (its imaginary part going from >= 0 to < 0); the product is rescaled
// now and then, its scale kept in logarithms.
struct CharacteristicTerm {
  double log_modulus = 0.0;
  double angle = 0.0;
};
CharacteristicTerm characteristic_term(const std::vector<double>& lambdas, double u) {
  double re = 1.0, im = 0.0, log_scale = 0.0;
  int turns = 0;
  for (const double lambda : lambdas) {
    const double x = 2.0 * lambda * u;
    const double next_re = re - im * x, next_im = im + re * x;
    if (im >= 0.0 && next_im < 0.0) ++turns;
    re = next_re;
    im = next_im;
    if (std::fabs(re) > 1e100 || std::fabs(im) > 1e100) {
      const double magnitude = std::hypot(re, im);
      log_scale += std::log(magnitude);
      re /= magnitude;
      im /= magnitude;
    }
  }
  CharacteristicTerm term;
  term.log_modulus = -0.5 * (0.5 * std::log(re * re + im * im) + log_scale);
  term.angle = 0.5 * (std::atan2(im, re) + 2.0 * kPi * turns);
  return term;
}

struct DaviesPlan {
  double delta = 0.0;   // step of the midpoint rule
  double tau2 = 0.0;    // variance of the convergence factor's normal term
  double terms = 0.0;   // terms needed (a double: it can be astronomically large)
};

// Step and number of terms for absolute accuracy `accuracy`: the error is
// aliasing + truncation (+ smoothing), each within its share.
DaviesPlan plan_davies(const std::vector<double>& lambdas, double c, double accuracy, double tau2) {
  DaviesPlan plan;
  plan.tau2 = tau2;
  const double share = tau2 > 0.0 ? accuracy / 3.0 : accuracy / 2.0;
  const MixtureCgf cgf(lambdas, tau2);
  const double span = aliasing_span(cgf, c, std::log(share));
  plan.delta = 2.0 * kPi / span;
  const double v = truncation_point(lambdas, tau2, std::log(share));
  plan.terms = std::ceil(v / plan.delta + 0.5);
  return plan;
}

// P(Q > c) = 1/2 + sum_k |phi_k| e^{-tau^2 u_k^2 / 2} sin(theta_k) / (pi (k + 1/2)),
// theta(u) = 1/2 sum_j atan(2 lambda_j u) - u c.
double davies_sum(const std::vector<double>& lambdas, double c, const DaviesPlan& plan, long terms) {
  double sum = 0.0;
  for (long k = 0; k < terms; ++k) {
    const double half_index = static_cast<double>(k) + 0.5;
    const double u = half_index * plan.delta;
    const CharacteristicTerm term = characteristic_term(lambdas, u);
    const double log_modulus = term.log_modulus - 0.5 * plan.tau2 * u * u;
    sum += std::exp(log_modulus) * std::sin(term.angle - u * c) / (kPi * half_index);
  }
  return 0.5 + sum;
}

// `sum_unreached`: sum term_limit terms where the plan needs more (an estimate
// without its accuracy); the combination skips that work.
DaviesTail davies_on_kept(const std::vector<double>& lambdas, double q, double accuracy, int term_limit,
                          bool sum_unreached = true) {
  DaviesTail result;
  if (q <= 0.0) {
    result.reached = true;
    return result;
  }
  DaviesPlan plan = plan_davies(lambdas, q, accuracy, 0.0);
  if (plan.terms > term_limit) {
    const double slope_bound = density_slope_bound(lambdas);
    if (std::isfinite(slope_bound)) {
      // tau^2 / 2 sup|f'| within a third of the accuracy.
      const DaviesPlan smoothed = plan_davies(lambdas, q, accuracy, 2.0 * (accuracy / 3.0) / slope_bound);
      if (smoothed.terms < plan.terms) plan = smoothed;
    }
  }
  result.reached = plan.terms <= term_limit;
  if (!result.reached && !sum_unreached) return result;
  result.terms = static_cast<int>(std::min<double>(plan.terms, term_limit));
  result.p = std::clamp(davies_sum(lambdas, q, plan, result.terms), 0.0, 1.0);
  return result;
}

// A Davies plan that serves every point of [low, high]: the step keeps the
// aliasing error within its share at both ends (at the low end the upper
// tail beyond c + L, at the high end the lower tail below c - L), so at
// every point between; the truncation point and the smoothing error do not
// depend on the point.
struct TablePlan {
  double delta = 0.0, tau2 = 0.0, terms = 0.0;
};
TablePlan plan_table(const std::vector<double>& lambdas, double low, double high, double accuracy, double tau2) {
  TablePlan plan;
  plan.tau2 = tau2;
  const double share = tau2 > 0.0 ? accuracy / 3.0 : accuracy / 2.0;
  const MixtureCgf cgf(lambdas, tau2);
  const double span = std::max(aliasing_span(cgf, std::max(low, 1e-300), std::log(share)),
                               aliasing_span(cgf, high, std::log(share)));
  plan.delta = 2.0 * kPi / span;
  const double v = truncation_point(lambdas, tau2, std::log(share));
  plan.terms = std::ceil(v / plan.delta + 0.5);
  return plan;
}

// ---- many points of one mixture ------------------------------------------------

}  // namespace

namespace sets_detail {

MixtureTailTable::MixtureTailTable(const std::vector<double>& eigenvalues, double low, double high)
    : lambdas_(kept_eigenvalues(eigenvalues)), low_(std::max(low, 0.0)), high_(high) {
  if (lambdas_.size() < 2 || !(high_ >= low_)) return;
  constexpr double kAccuracy = 1e-9;
  constexpr int kTermBudget = 2000;
  TablePlan plan = plan_table(lambdas_, low_, high_, kAccuracy, 0.0);
  if (plan.terms > kTermBudget) {
    // As davies_on_kept does: the convergence factor, where the density's
    // slope is bounded, makes its error independent of the point as well.
    const double slope_bound = density_slope_bound(lambdas_);
    if (std::isfinite(slope_bound)) {
      const TablePlan smoothed = plan_table(lambdas_, low_, high_, kAccuracy, 2.0 * (kAccuracy / 3.0) / slope_bound);
      if (smoothed.terms < plan.terms) plan = smoothed;
    }
  }
  if (!(plan.terms <= kTermBudget)) return;
  delta_ = plan.delta;
  const long count = static_cast<long>(plan.terms);
  terms_re_.resize(static_cast<std::size_t>(count));
  terms_im_.resize(static_cast<std::size_t>(count));
  for (long k = 0; k < count; ++k) {
    const double half_index = static_cast<double>(k) + 0.5;
    const double u = half_index * delta_;
    const CharacteristicTerm term = characteristic_term(lambdas_, u);
    const double amplitude = std::exp(term.log_modulus - 0.5 * plan.tau2 * u * u) / (kPi * half_index);
    terms_re_[static_cast<std::size_t>(k)] = amplitude * std::cos(term.angle);
    terms_im_[static_cast<std::size_t>(k)] = amplitude * std::sin(term.angle);
  }
  usable_ = true;
}

double MixtureTailTable::log_upper_tail(double q, bool absolute_will_do) const {
  if (q <= 0.0) return 0.0;
  if (usable_ && q >= low_ && q <= high_) {
    // sum_k Im[E_k e^{-i u_k q}], u_k = (k + 1/2) delta: Horner's rule in
    // r = e^{-i delta q}, then the half step.
    const double step_re = std::cos(delta_ * q), step_im = -std::sin(delta_ * q);
    double sum_re = 0.0, sum_im = 0.0;
    for (std::size_t k = terms_re_.size(); k-- > 0;) {
      const double re = sum_re * step_re - sum_im * step_im + terms_re_[k];
      const double im = sum_re * step_im + sum_im * step_re + terms_im_[k];
      sum_re = re;
      sum_im = im;
    }
    const double half_re = std::cos(0.5 * delta_ * q), half_im = -std::sin(0.5 * delta_ * q);
    const double p = 0.5 + (sum_re * half_im + sum_im * half_re);
    constexpr double kDaviesFloor = 1e-3;  // as in mixture_chisq_upper_tail
    constexpr double kTableAccuracy = 1e-9;
    if (p >= kDaviesFloor && p <= 1.0) return std::log(p);
    if (absolute_will_do) return std::log(std::clamp(p, 1e-300, 1.0));
    // Surely below the floor: Davies' own sum would end there too, so the
    // tail goes straight to the inversion.
    if (p < kDaviesFloor - 2.0 * kTableAccuracy) return tail_below_davies_floor(lambdas_, q).log_p;
  }
  return mixture_chisq_upper_tail(lambdas_, q).log_p;
}

}  // namespace sets_detail

namespace {

// ---- moment matching ------------------------------------------------------------

// ln Q(a, x), the regularized upper incomplete gamma function: the series for
// P(a, x) below x = a + 1, the continued fraction for Q (modified Lentz)
// above, both in log space.
double log_upper_incomplete_gamma(double a, double x) {
  if (x <= 0.0) return 0.0;
  const double log_prefix = -x + a * std::log(x) - std::lgamma(a);
  if (x < a + 1.0) {
    double term = 1.0 / a, sum = term;
    for (int n = 1; n < 100000; ++n) {
      term *= x / (a + n);
      sum += term;
      if (term < sum * 1e-17) break;
    }
    return std::log1p(-std::min(1.0, std::exp(log_prefix + std::log(sum))));
  }
  const double tiny = 1e-300;
  double b = x + 1.0 - a, cc = 1.0 / tiny, dd = 1.0 / b, h = dd;
  for (int n = 1; n < 100000; ++n) {
    const double an = -n * (n - a);
    b += 2.0;
    dd = an * dd + b;
    if (std::fabs(dd) < tiny) dd = tiny;
    cc = b + an / cc;
    if (std::fabs(cc) < tiny) cc = tiny;
    dd = 1.0 / dd;
    const double delta = dd * cc;
    h *= delta;
    if (std::fabs(delta - 1.0) < 1e-16) break;
  }
  return log_prefix + std::log(h);
}

struct MatchedChisq {
  double mean = 0.0, sd = 0.0, df = 0.0;
};

MatchedChisq match_moments(const std::vector<double>& lambdas) {
  double c1 = 0.0, c2 = 0.0, c3 = 0.0;
  for (const double lambda : lambdas) {
    c1 += lambda;
    c2 += lambda * lambda;
    c3 += lambda * lambda * lambda;
  }
  return {c1, std::sqrt(2.0 * c2), c2 * c2 * c2 / (c3 * c3)};
}

double matched_log_tail(const MatchedChisq& matched, double q) {
  const double x = (q - matched.mean) / matched.sd * std::sqrt(2.0 * matched.df) + matched.df;
  return log_upper_incomplete_gamma(0.5 * matched.df, 0.5 * x);
}

double moment_matching_on_kept(const std::vector<double>& lambdas, double q) {
  return matched_log_tail(match_moments(lambdas), q);
}

// ---- saddlepoint --------------------------------------------------------------------

// Returns NaN where q is too close to the mean for w and v to carry digits.
double saddlepoint_on_kept(const std::vector<double>& lambdas, double q) {
  const MixtureCgf cgf(lambdas);
  if (!(q > cgf.mean())) return std::numeric_limits<double>::quiet_NaN();
  const double z = cgf.solve(q);
  const double t = cgf.t_of(z);
  const double half_w2 = t * q - cgf.cgf(z);
  double second = 0.0;
  for (std::size_t k = 0; k < lambdas.size(); ++k) {
    const double b = 2.0 * lambdas[k] / cgf.d(k, z);
    second += 0.5 * b * b;
  }
  if (!(half_w2 > 1e-10 * std::max(1.0, t * q))) return std::numeric_limits<double>::quiet_NaN();
  const double w = std::sqrt(2.0 * half_w2);
  const double v = t * std::sqrt(second);
  return log_normal_upper_tail(w + std::log(v / w) / w);
}

// ---- the Bromwich integral along a parabola -------------------------------------------

// The crossing point t, the parabola's curvature a and the trapezoidal step.
struct Contour {
  double t = 0.0;
  double z = 1.0;
  double curvature = 0.0;
  double step = 0.0;
  double scale = 0.0;  // 1 / sqrt(K''(t)): the width of the peak
};

// Distance from the real y axis to the nearest y with t + a y^2 + i y = s*,
// for a real singularity s* = t + offset.
double strip_width(double curvature, double offset) {
  if (offset < 0.0) return (std::sqrt(1.0 + 4.0 * curvature * -offset) - 1.0) / (2.0 * curvature);
  const double discriminant = 1.0 - 4.0 * curvature * offset;
  if (discriminant <= 0.0) return 1.0 / (2.0 * curvature);
  return (1.0 - std::sqrt(discriminant)) / (2.0 * curvature);
}

// ln(1 - w) for complex w, to absolute accuracy, which is all the sum of
// such logarithms needs: the library's complex logarithm takes pains over the
// relative accuracy of ln|1 - w| near |1 - w| = 1 (an exactly rounded
// x^2 + y^2 - 1, sorting its terms), which made it most of the inversion's cost.
std::complex<double> log_of_one_minus(std::complex<double> w) {
  const double re = 1.0 - w.real(), im = -w.imag();
  const double modulus_squared_less_one = w.real() * (w.real() - 2.0) + im * im;
  return {0.5 * std::log1p(modulus_squared_less_one), std::atan2(im, re)};
}

InversionTail invert_on_kept(const std::vector<double>& lambdas, double q) {
  InversionTail result;
  const MixtureCgf cgf(lambdas);
  const double half_over_largest = 0.5 / lambdas.front();  // 1 / (2 lambda_1), the first branch point
  Contour contour;
  contour.z = cgf.solve(q);
  contour.t = cgf.t_of(contour.z);
  auto second_and_third = [&](double z, double& second, double& third) {
    second = third = 0.0;
    for (std::size_t k = 0; k < lambdas.size(); ++k) {
      const double b = 2.0 * lambdas[k] / cgf.d(k, z);
      second += 0.5 * b * b;
      third += b * b * b;
    }
  };
  double second, third;
  second_and_third(contour.z, second, third);
  // Near the mean the saddlepoint meets the pole of 1/s at 0: cross the axis
  // at least half the peak's width (or half way to the branch point) away.
  const double scale = 1.0 / std::sqrt(second);
  const double keep_off = 0.5 * std::min(scale, half_over_largest);
  if (std::fabs(contour.t) < keep_off) {
    contour.t = contour.t >= 0.0 ? keep_off : -keep_off;
    contour.z = 1.0 - 2.0 * lambdas.front() * contour.t;
    second_and_third(contour.z, second, third);
  }
  contour.scale = 1.0 / std::sqrt(second);
  contour.curvature = third / (6.0 * second);  // the steepest-descent path's at the saddlepoint
  const double width = std::min(strip_width(contour.curvature, half_over_largest * contour.z),  // s_1 - t = z / (2 lambda_1)
                                strip_width(contour.curvature, -contour.t));                    // the pole at s = 0
  contour.step = 0.5 * std::min(width, contour.scale);

  // Everything relative to the integrand's value at y = 0: e^{K(t) - tq} / t.
  const double log_level = cgf.cgf(contour.z) - contour.t * q;
  std::vector<double> b(lambdas.size());
  for (std::size_t k = 0; k < lambdas.size(); ++k) b[k] = 2.0 * lambdas[k] / cgf.d(k, contour.z);
  // (1/pi) Im[exp(K(s) - K(t) - (s - t) q) (2 a y + i) / s], s = t + a y^2 + i y.
  auto integrand = [&](double y) {
    const std::complex<double> offset(contour.curvature * y * y, y);
    std::complex<double> log_ratio = -offset * q;
    for (const double bk : b) log_ratio -= 0.5 * log_of_one_minus(offset * bk);
    const std::complex<double> value =
        std::exp(log_ratio) * std::complex<double>(2.0 * contour.curvature * y, 1.0) / (contour.t + offset);
    return value.imag() / kPi;
  };
  // Trapezoidal sum h [F(0)/2 + sum_k F(kh)], nodes out to where they stop counting.
  auto sum_from = [&](double first, double spacing, double scale_of_sum) {
    double sum = 0.0;
    int small_in_a_row = 0;
    for (int node = 0; node < 200000; ++node) {
      const double y = first + spacing * node;
      const double value = integrand(y);
      sum += value;
      ++result.nodes;
      const bool small = std::fabs(value) * spacing <= 1e-17 * std::max(std::fabs(sum * spacing), scale_of_sum);
      small_in_a_row = small ? small_in_a_row + 1 : 0;
      if (small_in_a_row >= 4 && y > 4.0 * contour.scale) return sum;
    }
    return std::numeric_limits<double>::quiet_NaN();
  };
  double step = contour.step;
  const double at_zero = integrand(0.0);
  double estimate = step * (0.5 * at_zero + sum_from(step, step, 0.0));
  for (int halving = 0; halving < 8 && std::isfinite(estimate); ++halving) {
    const double refined = 0.5 * estimate + 0.5 * step * sum_from(0.5 * step, step, std::fabs(estimate));
    step *= 0.5;
    const bool converged = std::fabs(refined - estimate) <= 1e-9 * std::fabs(refined);
    estimate = refined;
    if (converged) {
      result.converged = true;
      break;
    }
  }
  if (!std::isfinite(estimate)) return result;
  if (contour.t > 0.0) {
    result.converged = result.converged && estimate > 0.0;
    result.log_p = log_level + std::log(std::fabs(estimate));
  } else {
    // Crossing left of the pole at 0 gives P(Q > q) - 1 = -P(Q <= q).
    const double lower = -std::exp(log_level) * estimate;
    result.converged = result.converged && lower >= 0.0 && lower < 1.0;
    result.log_p = std::log1p(-std::clamp(lower, 0.0, 1.0));
  }
  return result;
}

MixtureTail tail_below_davies_floor(const std::vector<double>& lambdas, double q) {
  const InversionTail inverted = invert_on_kept(lambdas, q);
  if (inverted.converged && inverted.log_p <= 0.0) return {inverted.log_p, MixtureTailMethod::contour_inversion};
  const double saddlepoint = saddlepoint_on_kept(lambdas, q);
  if (std::isfinite(saddlepoint)) return {saddlepoint, MixtureTailMethod::saddlepoint};
  return {moment_matching_on_kept(lambdas, q), MixtureTailMethod::moment_matching};
}

}  // namespace

const char* mixture_tail_method_name(MixtureTailMethod method) {
  switch (method) {
    case MixtureTailMethod::single_chisq: return "chisq1";
    case MixtureTailMethod::davies: return "davies";
    case MixtureTailMethod::saddlepoint: return "saddlepoint";
    case MixtureTailMethod::moment_matching: return "moments";
    case MixtureTailMethod::contour_inversion: return "inversion";
  }
  return "unknown";
}

DaviesTail davies_upper_tail(const std::vector<double>& eigenvalues, double q, double accuracy, int term_limit) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty()) return {q < 0.0 ? 1.0 : 0.0, true, 0};
  return davies_on_kept(lambdas, q, accuracy, term_limit);
}

double moment_matching_upper_log_tail(const std::vector<double>& eigenvalues, double q) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty() || q <= 0.0) return 0.0;
  return moment_matching_on_kept(lambdas, q);
}

double saddlepoint_upper_log_tail(const std::vector<double>& eigenvalues, double q) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty()) return 0.0;
  return saddlepoint_on_kept(lambdas, q);
}

InversionTail contour_inversion_upper_log_tail(const std::vector<double>& eigenvalues, double q) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty() || q <= 0.0) return {0.0, true, 0};
  return invert_on_kept(lambdas, q);
}

namespace sets_detail {

MatchedChisqTail::MatchedChisqTail(const std::vector<double>& eigenvalues) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty()) return;
  const MatchedChisq matched = match_moments(lambdas);
  any_ = true;
  mean_ = matched.mean;
  sd_ = matched.sd;
  df_ = matched.df;
}

double MatchedChisqTail::log_upper_tail(double q) const {
  if (!any_ || q <= 0.0) return 0.0;
  return std::min(0.0, matched_log_tail({mean_, sd_, df_}, q));
}

}  // namespace sets_detail

MixtureTail screening_mixture_upper_tail(const std::vector<double>& eigenvalues, double q) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty() || q <= 0.0) return {0.0, MixtureTailMethod::single_chisq};
  if (lambdas.size() == 1) return {log_chisq1_upper_tail(q / lambdas.front()), MixtureTailMethod::single_chisq};
  const double saddlepoint = saddlepoint_on_kept(lambdas, q);
  if (std::isfinite(saddlepoint) && saddlepoint <= 0.0) return {saddlepoint, MixtureTailMethod::saddlepoint};
  return {std::min(0.0, moment_matching_on_kept(lambdas, q)), MixtureTailMethod::moment_matching};
}

MixtureTail mixture_chisq_upper_tail(const std::vector<double>& eigenvalues, double q) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty() || q <= 0.0) return {0.0, MixtureTailMethod::single_chisq};
  if (lambdas.size() == 1) return {log_chisq1_upper_tail(q / lambdas.front()), MixtureTailMethod::single_chisq};

  // Davies' absolute accuracy of 1e-9 is relative accuracy 1e-6 down to
  // p = 1e-3. Chernoff's bound tells without a sum when p is surely below.
  constexpr double kDaviesAccuracy = 1e-9;
  constexpr double kDaviesFloor = 1e-3;
  const MixtureCgf cgf(lambdas);
  if (q <= cgf.mean() || cgf.log_chernoff_bound(q) > std::log(kDaviesFloor)) {
    // Davies' sum costs a logarithm and an arc tangent per term and
    // eigenvalue, the inversion a complex logarithm per node and eigenvalue
    // over a few hundred nodes: beyond 2000 terms the inversion is the
    // cheaper (and no less accurate) of the two.
    constexpr int term_budget = 2000;
    const DaviesTail davies = davies_on_kept(lambdas, q, kDaviesAccuracy, term_budget, false);
    if (davies.reached && davies.p >= kDaviesFloor) return {std::log(davies.p), MixtureTailMethod::davies};
  }
  return tail_below_davies_floor(lambdas, q);
}

}  // namespace tamis
