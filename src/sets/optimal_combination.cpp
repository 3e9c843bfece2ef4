// The p-value of the optimal combination of burden and variance-component
// tests (Lee et al. 2012, AJHG 91:224-237, Appendix), for the smallest
// per-rho p-value T over the grid.
//
// With Z = diag(w) U ~ N(0, K) under the null, let s = 1'K1 (the burden's
// variance) and split Z along the burden direction: eta_0 = B^2 / s is
// chi-square(1), and
//   Q_rho = (1 - rho) kappa + tau(rho) eta_0,
//   tau(rho) = rho s + (1 - rho) |K1|^2 / s,
//   kappa = eta + zeta,
// where eta is the mixture of chi-square(1) with the eigenvalues of
// K_res = K - K1 1'K / s (K's part orthogonal to the burden), independent of
// eta_0, and zeta = 2 sqrt(eta_0) a' r (a = K1 / sqrt(s), r the residual part)
// is the cross term, uncorrelated with eta and with mean 0 and variance
// 4 a' K_res a. Following the paper, kappa is taken as independent of eta_0
// and distributed as eta standardised to kappa's mean and variance:
//   P(kappa > d) = P(eta > (d - mu) sd_eta / sd_kappa + mu),  mu = tr K_res.
// With q_min(rho) the (1 - T) quantile of Q_rho's null distribution,
//   p = 1 - int F_kappa(delta(x)) f_chisq1(x) dx,
//   delta(x) = min_{rho < 1} (q_min(rho) - tau(rho) x) / (1 - rho),
// over x < q_min(1) / tau(1) when rho = 1 is in the grid (beyond it the
// burden alone exceeds its quantile) and over x > 0 otherwise.
//
// Numerics (ours):
// - q_min(rho) by root-finding on the mixture tail of each Q_rho (the
//   mixture_chisq_upper_tail routes, accurate to ~1e-9 relative), not by the
//   moment-matching quantile; at rho = 1 the chi-square(1) quantile scaled by s.
// - The integral is written as
//     p = int_0^{x_max} P(kappa > delta(x)) f_chisq1(x) dx + P(chisq1 > x_max),
//   which equals 1 - int F_kappa f exactly but sums positive terms only: the
//   published 1 - integral loses every digit once p falls near 1e-9 and the
//   paper then falls back on bounds, whereas here P(kappa > d) comes from the
//   mixture tail in log space and p keeps its relative accuracy down to and
//   below 1e-300. The rest is exactly the published approximation.
// - x = v^2 takes out the 1/sqrt(x) of the chi-square(1) density; the
//   integrand is split at the kinks of delta (where the minimising rho
//   changes, and where P(kappa > delta) reaches 1) and integrated by adaptive
//   Gauss-Legendre quadrature (15 nodes, each interval checked against its
//   two halves) relative to its largest value, so that underflow cannot occur.
// - The result is kept within [T, T x grid size]: no combination is more
//   significant than its best member, and Bonferroni bounds it from above.
#include <Eigen/Dense>
#include <algorithm>
#include <array>
#include <cmath>
#include <functional>
#include <limits>
#include <memory>
#include <stdexcept>

#include "sets/mixture_cgf.hpp"
#include "sets/rho_family.hpp"
#include "tamis/distributions.hpp"
#include "tamis/set_tests.hpp"

namespace tamis {
namespace sets_detail {
namespace {

constexpr double kPi = 3.14159265358979323846;

// ---- adaptive Gauss-Legendre quadrature ------------------------------------------

constexpr int kRuleSize = 15;
struct GaussLegendreRule {
  std::array<double, kRuleSize> node{}, weight{};
};

// Nodes as the roots of P_15 by Newton's method from Tricomi's starting
// values; weights 2 / ((1 - x^2) P'_15(x)^2).
GaussLegendreRule make_gauss_legendre_rule() {
  GaussLegendreRule rule;
  for (int index = 0; index < kRuleSize; ++index) {
    double x = std::cos(kPi * (index + 0.75) / (kRuleSize + 0.5));
    double derivative = 1.0;
    for (int iteration = 0; iteration < 100; ++iteration) {
      double previous = 1.0, current = x;
      for (int degree = 2; degree <= kRuleSize; ++degree) {
        const double next = ((2.0 * degree - 1.0) * x * current - (degree - 1.0) * previous) / degree;
        previous = current;
        current = next;
      }
      derivative = kRuleSize * (x * current - previous) / (x * x - 1.0);
      const double step = current / derivative;
      x -= step;
      if (std::fabs(step) < 1e-17) break;
    }
    rule.node[index] = x;
    rule.weight[index] = 2.0 / ((1.0 - x * x) * derivative * derivative);
  }
  return rule;
}

const GaussLegendreRule& gauss_legendre_rule() {
  static const GaussLegendreRule rule = make_gauss_legendre_rule();
  return rule;
}

double gauss_legendre(const std::function<double(double)>& f, double a, double b) {
  const GaussLegendreRule& rule = gauss_legendre_rule();
  const double half = 0.5 * (b - a), middle = 0.5 * (a + b);
  double sum = 0.0;
  for (int index = 0; index < kRuleSize; ++index) sum += rule.weight[index] * f(middle + half * rule.node[index]);
  return half * sum;
}

// `whole` is the rule's value on [a, b]; the interval is accepted when its two
// halves agree with it to `tolerance` (absolute, shared out by length).
double integrate_adaptively(const std::function<double(double)>& f, double a, double b, double whole,
                            double tolerance, int depth, int max_depth) {
  const double middle = 0.5 * (a + b);
  const double left = gauss_legendre(f, a, middle), right = gauss_legendre(f, middle, b);
  if (std::fabs(left + right - whole) <= tolerance || depth >= max_depth) return left + right;
  return integrate_adaptively(f, a, middle, left, 0.5 * tolerance, depth + 1, max_depth) +
         integrate_adaptively(f, middle, b, right, 0.5 * tolerance, depth + 1, max_depth);
}

// ---- the decomposition ---------------------------------------------------------------

struct KappaLaw {
  std::vector<double> eta_eigenvalues;
  double mean = 0.0;      // of eta and of kappa
  double sd_ratio = 0.0;  // sd(eta) / sd(kappa)
  std::unique_ptr<MixtureTailTable> eta_tail;  // eta's tail over every point the integral meets (exact)
  std::unique_ptr<MatchedChisqTail> eta_screen;  // or its moment-matched chi-square (the screen)
  double on_eta_scale(double d) const { return (d - mean) * sd_ratio + mean; }
};

// ln P(kappa > d). With `absolute_will_do` (the integral is at least 1e-3),
// the table's absolute accuracy is enough everywhere.
double log_kappa_upper_tail(const KappaLaw& kappa, double d, bool absolute_will_do) {
  const double on_eta_scale = kappa.on_eta_scale(d);
  if (on_eta_scale <= 0.0) return 0.0;
  // The screen: the moment-matched chi-square at every node.
  if (!kappa.eta_tail) return kappa.eta_screen->log_upper_tail(on_eta_scale);
  return kappa.eta_tail->log_upper_tail(on_eta_scale, absolute_will_do);
}

// delta(x) = min over the lines (intercept - slope x).
struct Line {
  double intercept = 0.0, slope = 0.0;
};
double lower_envelope(const std::vector<Line>& lines, double x) {
  double lowest = std::numeric_limits<double>::infinity();
  for (const Line& line : lines) lowest = std::min(lowest, line.intercept - line.slope * x);
  return lowest;
}

}  // namespace

std::vector<double> nonnegative_eigenvalues(const Eigen::MatrixXd& symmetric) {
  const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> solver(symmetric, Eigen::EigenvaluesOnly);
  if (solver.info() != Eigen::Success) throw std::runtime_error("set tests: eigenvalue decomposition failed");
  std::vector<double> values(solver.eigenvalues().data(), solver.eigenvalues().data() + symmetric.rows());
  for (double& value : values) value = std::max(value, 0.0);
  return values;
}

double chisq1_upper_quantile_from_log(double log_p) {
  if (!(log_p < 0.0)) return 0.0;
  if (log_p > -700.0) return chisq1_upper_quantile(std::exp(log_p));
  // Newton's method on ln P(X > q), nearly linear in q out here:
  // d/dq ln P(X > q) = -f(q) / P(X > q).
  double q = -2.0 * log_p;
  for (int iteration = 0; iteration < 100; ++iteration) {
    const double log_tail = log_chisq1_upper_tail(q);
    const double log_density = -0.5 * q - 0.5 * std::log(2.0 * kPi * q);
    const double step = (log_tail - log_p) / std::exp(log_density - log_tail);
    q += step;
    if (std::fabs(step) <= 1e-14 * q) break;
  }
  return q;
}

double mixture_upper_quantile(const std::vector<double>& eigenvalues, double log_p, SetTestPrecision precision) {
  const std::vector<double> lambdas = kept_eigenvalues(eigenvalues);
  if (lambdas.empty() || !(log_p < 0.0)) return 0.0;
  if (lambdas.size() == 1) return lambdas.front() * chisq1_upper_quantile_from_log(log_p);
  std::unique_ptr<MixtureTailTable> table;  // made once the bracket is known
  // Away from the root the search only needs the sign: below p = 1e-3 the
  // table's absolute accuracy points the way when the target is above it.
  const bool absolute_will_do = log_p >= std::log(1e-3);
  const bool screening = precision == SetTestPrecision::screening;
  std::unique_ptr<MatchedChisqTail> matched;
  if (screening) matched = std::make_unique<MatchedChisqTail>(lambdas);
  auto excess = [&](double q) {
    // The screen takes its quantiles from the moment-matched chi-square,
    // as the paper does: a closed form instead of a saddlepoint per step.
    const double log_tail = screening ? matched->log_upper_tail(q) : table->log_upper_tail(q, absolute_will_do);
    return log_tail - log_p;
  };
  // P(Q > q) >= P(lambda_1 X_1 > q) puts the root above the first bracket;
  // Chernoff's bound puts it below the second.
  double low = lambdas.front() * chisq1_upper_quantile_from_log(log_p);
  const MixtureCgf cgf(lambdas);
  double high = std::max(cgf.mean(), low) * 2.0;
  while (cgf.log_chernoff_bound(high) > log_p) high *= 2.0;
  if (!screening) table = std::make_unique<MixtureTailTable>(lambdas, low, high);
  double excess_low = excess(low), excess_high = excess(high);
  if (excess_low <= 0.0) return low;
  if (excess_high >= 0.0) return high;
  // The Illinois variant of regula falsi: ln P(Q > q) is smooth and close to
  // linear in q, so it takes a handful of tail evaluations.
  int last_side = 0;
  for (int iteration = 0; iteration < 100; ++iteration) {
    const double q = high - excess_high * (high - low) / (excess_high - excess_low);
    const double value = excess(q);
    if (std::fabs(value) <= 1e-11 * std::max(1.0, std::fabs(log_p)) || high - low <= 1e-13 * high) return q;
    if (value > 0.0) {
      low = q;
      excess_low = value;
      if (last_side == -1) excess_high *= 0.5;
      last_side = -1;
    } else {
      high = q;
      excess_high = value;
      if (last_side == 1) excess_low *= 0.5;
      last_side = 1;
    }
  }
  return 0.5 * (low + high);
}

RhoFamily decompose_rho_family(const Eigen::MatrixXd& weighted_covariance, const std::vector<double>& rho_grid) {
  const Eigen::Index m = weighted_covariance.rows();
  RhoFamily family;
  family.rho = rho_grid;
  const Eigen::VectorXd ones = Eigen::VectorXd::Ones(m);
  for (const double rho : rho_grid) {
    if (!(rho >= 0.0 && rho <= 1.0)) throw std::invalid_argument("set tests: rho must lie in [0, 1]");
    if (rho == 1.0) {
      family.eigenvalues.push_back({std::max(0.0, ones.dot(weighted_covariance * ones))});
      continue;
    }
    // R_rho^1/2 = sqrt(1 - rho) (I - P) + sqrt(1 - rho + rho m) P, P = 1 1' / m.
    const double outside = std::sqrt(1.0 - rho);
    const double along = std::sqrt(1.0 - rho + rho * static_cast<double>(m));
    const Eigen::MatrixXd root = outside * Eigen::MatrixXd::Identity(m, m) +
                                 ((along - outside) / static_cast<double>(m)) * Eigen::MatrixXd::Ones(m, m);
    const Eigen::MatrixXd product = root * weighted_covariance * root;
    family.eigenvalues.push_back(nonnegative_eigenvalues(0.5 * (product + product.transpose())));
  }
  return family;
}

double optimal_log_p_from_family(const Eigen::MatrixXd& k, const RhoFamily& family, double min_log_p,
                                 SetTestPrecision precision) {
  const std::size_t grid_size = family.rho.size();
  if (grid_size <= 1 || !(min_log_p < 0.0)) return std::min(0.0, min_log_p);
  const Eigen::Index m = k.rows();
  const Eigen::VectorXd k1 = k * Eigen::VectorXd::Ones(m);
  const double burden_variance = k1.sum();
  // Without a burden direction B = 0 and every Q_rho, rho < 1, is Q scaled:
  // their events coincide and the combination's p is the smallest p itself.
  if (!(burden_variance > 1e-12 * std::max(k.trace(), std::numeric_limits<double>::min()))) return min_log_p;

  std::vector<Line> lines;
  double x_max = std::numeric_limits<double>::infinity();
  const double spread = k1.squaredNorm() / burden_variance;
  for (std::size_t index = 0; index < grid_size; ++index) {
    const double rho = family.rho[index];
    const double tau = rho * burden_variance + (1.0 - rho) * spread;
    const double quantile = mixture_upper_quantile(family.eigenvalues[index], min_log_p, precision);
    if (rho == 1.0) {
      x_max = std::min(x_max, quantile / tau);
    } else {
      lines.push_back({quantile / (1.0 - rho), tau / (1.0 - rho)});
    }
  }
  if (lines.empty()) return min_log_p;

  const Eigen::MatrixXd residual = k - k1 * k1.transpose() / burden_variance;
  KappaLaw kappa;
  kappa.eta_eigenvalues = nonnegative_eigenvalues(0.5 * (residual + residual.transpose()));
  double eta_variance = 0.0;
  for (const double lambda : kappa.eta_eigenvalues) {
    kappa.mean += lambda;
    eta_variance += 2.0 * lambda * lambda;
  }
  const double zeta_variance = std::max(0.0, 4.0 * k1.dot(residual * k1) / burden_variance);
  const double log_bonferroni = std::min(0.0, min_log_p + std::log(static_cast<double>(grid_size)));
  auto within_bounds = [&](double log_p) { return std::clamp(log_p, min_log_p, log_bonferroni); };

  if (!(eta_variance > 1e-24 * burden_variance * burden_variance)) {
    // kappa = 0: the only randomness left is eta_0, and no Q_rho exceeds its
    // quantile while eta_0 stays below every q_min(rho) / tau(rho).
    double x_first = x_max;
    for (const Line& line : lines) x_first = std::min(x_first, line.intercept / line.slope);
    return within_bounds(log_chisq1_upper_tail(x_first));
  }
  kappa.sd_ratio = std::sqrt(eta_variance / (eta_variance + zeta_variance));
  // delta falls as x grows: its value at x = 0 is the farthest point.
  if (precision == SetTestPrecision::exact) {
    kappa.eta_tail = std::make_unique<MixtureTailTable>(kappa.eta_eigenvalues, 0.0,
                                                        kappa.on_eta_scale(lower_envelope(lines, 0.0)));
  } else {
    kappa.eta_screen = std::make_unique<MatchedChisqTail>(kappa.eta_eigenvalues);
  }

  // p >= T: with T at least 1e-3, absolute accuracy 1e-9 in the integrand is
  // relative accuracy 1e-6 in p.
  const bool absolute_will_do = min_log_p >= std::log(1e-3);
  // x = v^2: the integrand is P(kappa > delta(v^2)) 2 phi(v).
  auto log_integrand = [&](double v) {
    return log_kappa_upper_tail(kappa, lower_envelope(lines, v * v), absolute_will_do) + std::log(2.0) - 0.5 * v * v -
           0.5 * std::log(2.0 * kPi);
  };
  // Without rho = 1 the range is cut where P(chisq1 > v^2) is negligible
  // beside p >= T.
  const double v_end = std::isfinite(x_max) ? std::sqrt(x_max) : std::sqrt(2.0 * (60.0 - min_log_p));

  // Break at the kinks of delta and where P(kappa > delta) reaches 1.
  std::vector<double> breaks = {0.0, v_end};
  auto add_break_at_x = [&](double x) {
    if (x > 0.0 && std::sqrt(x) < v_end) breaks.push_back(std::sqrt(x));
  };
  for (std::size_t first = 0; first < lines.size(); ++first)
    for (std::size_t second = first + 1; second < lines.size(); ++second) {
      const double slope_gap = lines[first].slope - lines[second].slope;
      if (slope_gap == 0.0) continue;
      // A crossing is a kink only where the two lines are the envelope.
      const double x = (lines[first].intercept - lines[second].intercept) / slope_gap;
      const double on_line = lines[first].intercept - lines[first].slope * x;
      if (on_line <= lower_envelope(lines, x) + 1e-12 * std::fabs(on_line)) add_break_at_x(x);
    }
  const double certain_below = kappa.mean - kappa.mean / kappa.sd_ratio;  // delta at which P(kappa > delta) = 1
  if (lower_envelope(lines, 0.0) > certain_below) {
    double low = 0.0, high = 1.0;
    while (lower_envelope(lines, high) > certain_below) high *= 2.0;
    for (int step = 0; step < 100; ++step) {
      const double middle = 0.5 * (low + high);
      (lower_envelope(lines, middle) > certain_below ? low : high) = middle;
    }
    add_break_at_x(high);
  }
  std::sort(breaks.begin(), breaks.end());
  breaks.erase(std::unique(breaks.begin(), breaks.end()), breaks.end());

  // The screening tails switch method at the mean and carry their own few
  // percent: their integral is taken to 1e-4, and not chased into a jump.
  const bool screening = precision == SetTestPrecision::screening;
  const double relative_tolerance = screening ? 1e-4 : 1e-8;
  const int max_depth = screening ? 8 : 30;
  // Scale by the largest value on the pieces' quadrature nodes, then add up.
  const GaussLegendreRule& rule = gauss_legendre_rule();
  const std::size_t pieces = breaks.size() - 1;
  std::vector<std::array<double, kRuleSize>> node_logs(pieces);
  double log_scale = -std::numeric_limits<double>::infinity();
  for (std::size_t piece = 0; piece < pieces; ++piece) {
    const double half = 0.5 * (breaks[piece + 1] - breaks[piece]), middle = 0.5 * (breaks[piece] + breaks[piece + 1]);
    for (int index = 0; index < kRuleSize; ++index) {
      node_logs[piece][index] = log_integrand(middle + half * rule.node[index]);
      log_scale = std::max(log_scale, node_logs[piece][index]);
    }
  }
  std::vector<double> wholes(pieces);
  double total = 0.0;
  for (std::size_t piece = 0; piece < pieces; ++piece) {
    double sum = 0.0;
    for (int index = 0; index < kRuleSize; ++index) sum += rule.weight[index] * std::exp(node_logs[piece][index] - log_scale);
    wholes[piece] = 0.5 * (breaks[piece + 1] - breaks[piece]) * sum;
    total += wholes[piece];
  }
  auto scaled = [&](double v) { return std::exp(log_integrand(v) - log_scale); };
  double integral = 0.0;
  for (std::size_t piece = 0; piece < pieces; ++piece)
    integral += integrate_adaptively(scaled, breaks[piece], breaks[piece + 1], wholes[piece],
                                     relative_tolerance * total / static_cast<double>(pieces), 0, max_depth);
  double log_p = log_scale + std::log(integral);
  if (std::isfinite(x_max)) log_p = log_add(log_p, log_chisq1_upper_tail(x_max));
  return within_bounds(log_p);
}

}  // namespace sets_detail

double chisq1_quantile_of_log_p(double log_p) { return sets_detail::chisq1_upper_quantile_from_log(log_p); }

double optimal_combination_log_p(const Eigen::MatrixXd& weighted_covariance, const std::vector<double>& rho_grid,
                                 double min_log_p, SetTestPrecision precision) {
  const sets_detail::RhoFamily family = sets_detail::decompose_rho_family(weighted_covariance, rho_grid);
  return sets_detail::optimal_log_p_from_family(weighted_covariance, family, min_log_p, precision);
}

}  // namespace tamis
