// Saddlepoint p-values of the binary score statistic (Dey et al. 2017).
//
// Each term of the cumulant generating function is evaluated in a form that
// keeps its precision for any sign and size of s = t gt_i:
//   ln(1 - mu + mu e^s) = ln1p(mu expm1(s))                 (s <= 0)
//                       = s + ln1p((1 - mu) expm1(-s))      (s > 0)
// and the tilted probability pi = mu e^s / (1 - mu + mu e^s) together with
// pi - mu and pi (1 - pi) likewise, so that K, K' and K'' neither overflow nor
// cancel. K' is increasing (K'' > 0) from the smallest to the largest value
// U can take, so the saddlepoint is bracketed and found by Newton's method
// with a bisection safeguard.
#include "tamis/saddlepoint.hpp"

#include <algorithm>
#include <cassert>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <limits>
#include <vector>

#include "common/vector_clones.hpp"
#include "model/vector_math.hpp"
#include "tamis/distributions.hpp"

namespace tamis {
namespace detail {

// The terms of U's CGF: the samples whose adjusted genotype is non-zero (the
// others do not move U), each exactly, and at most one normal part.
struct AdjustedTerms {
  std::vector<double> genotype;
  std::vector<double> mu;
  std::vector<double> one_minus_mu;
  std::vector<double> mu_times_one_minus_mu;
  double largest_value = 0.0;   // the largest value U can take
  double smallest_value = 0.0;  // the smallest
  double variance = 0.0;        // K''(0)
  // Variance of the part of U left to the normal approximation (its CGF is
  // gaussian_variance t^2 / 2); with one, U is unbounded.
  double gaussian_variance = 0.0;
};

}  // namespace detail

namespace {

using detail::AdjustedTerms;
using detail::expm1_nonpositive;
using detail::log1p_nonpositive;

constexpr double kInfinity = std::numeric_limits<double>::infinity();

// The non-carriers are left to the normal approximation only when there are
// this many: their adjusted genotypes are then small and numerous, and their
// sum close to normal. Fewer are summed exactly (cheap at that size).
constexpr std::size_t kMinimumNormalPart = 500;

void add_term(AdjustedTerms& terms, double g, double m, double m_bar) {
  terms.genotype.push_back(g);
  terms.mu.push_back(m);
  terms.one_minus_mu.push_back(m_bar);
  terms.mu_times_one_minus_mu.push_back(m * m_bar);
  // U is largest when every Y_i with gt_i > 0 is 1 and every other is 0.
  if (g > 0.0) {
    terms.largest_value += g * m_bar;
    terms.smallest_value -= g * m;
  } else {
    terms.largest_value -= g * m;
    terms.smallest_value += g * m_bar;
  }
  terms.variance += g * g * m * m_bar;
}

void reserve_terms(AdjustedTerms& terms, std::size_t count) {
  terms.genotype.reserve(count);
  terms.mu.reserve(count);
  terms.one_minus_mu.reserve(count);
  terms.mu_times_one_minus_mu.reserve(count);
}

void add_gaussian_part(AdjustedTerms& terms, double variance) {
  if (!(variance > 0.0)) return;
  terms.gaussian_variance = variance;
  terms.variance += variance;
  terms.largest_value = kInfinity;
  terms.smallest_value = -kInfinity;
}

AdjustedTerms collect_terms(const Eigen::VectorXd& adjusted, const Eigen::VectorXd& mu,
                            const Eigen::VectorXd& one_minus_mu) {
  AdjustedTerms terms;
  for (Eigen::Index sample_idx = 0; sample_idx < adjusted.size(); ++sample_idx) {
    const double g = adjusted[sample_idx];
    if (g != 0.0) add_term(terms, g, mu[sample_idx], one_minus_mu[sample_idx]);
  }
  return terms;
}

struct Cumulants {
  double k = 0.0;   // K(t)
  double k1 = 0.0;  // K'(t)
  double k2 = 0.0;  // K''(t)
};

// Terms per group in the sums below: each group position keeps its own
// partial sums, added up in a fixed order at the end, so the loop vectorises
// without the result depending on the vector width.
constexpr std::size_t kTermLanes = 8;

// K' and K'' only: all that Newton's method needs, without the logarithm
// that K takes, which would double the cost of every iteration. With
// e = expm1(-|s|) and s = t gt_i, the tilted probability
// pi = mu e^s / (1 - mu + mu e^s) gives, for a = mu (s <= 0) or 1 - mu (s > 0)
// and D = 1 + a e,
//   pi - mu = -+ mu (1 - mu) e / D,   pi (1 - pi) = mu (1 - mu) (1 + e) / D^2,
// a form that neither overflows nor cancels for either sign of s.
// `below ? a : b` as a bitwise blend, so that the compiler does not
// if-convert the whole expressions that follow into both of their branches
// (it computed every division twice).
TAMIS_ALWAYS_INLINE double pick(bool below, double a, double b) {
  std::int64_t a_bits, b_bits;
  std::memcpy(&a_bits, &a, sizeof a_bits);
  std::memcpy(&b_bits, &b, sizeof b_bits);
  const std::int64_t mask = -static_cast<std::int64_t>(below);
  const std::int64_t bits = (a_bits & mask) | (b_bits & ~mask);
  double picked;
  std::memcpy(&picked, &bits, sizeof picked);
  return picked;
}

TAMIS_ALWAYS_INLINE void tilted_term(double g, double m, double m_bar, double spread, double t, double& slope,
                                     double& curvature) {
  const double s = t * g;
  const bool below = s <= 0.0;
  const double e = expm1_nonpositive(-std::fabs(s));
  const double inverse = 1.0 / (1.0 + pick(below, m, m_bar) * e);
  const double signed_slope = spread * e * inverse;
  slope = g * (signed_slope * pick(below, 1.0, -1.0));
  curvature = (g * g) * ((spread * (1.0 + e)) * (inverse * inverse));
}

TAMIS_VECTOR_CLONES
void sum_slope_and_curvature(const double* genotype, const double* mu, const double* one_minus_mu,
                             const double* mu_times_one_minus_mu, std::size_t count, double t,
                             double* k1, double* k2) {
  double k1_lanes[kTermLanes] = {};
  double k2_lanes[kTermLanes] = {};
  double slopes[kTermLanes], curvatures[kTermLanes];
  for (std::size_t group = 0; group < count; group += kTermLanes) {
    const std::size_t lanes = std::min(kTermLanes, count - group);
    if (lanes == kTermLanes) {
      for (std::size_t lane = 0; lane < kTermLanes; ++lane) {
        tilted_term(genotype[group + lane], mu[group + lane], one_minus_mu[group + lane],
                    mu_times_one_minus_mu[group + lane], t, slopes[lane], curvatures[lane]);
      }
    } else {
      for (std::size_t lane = 0; lane < kTermLanes; ++lane) {
        slopes[lane] = curvatures[lane] = 0.0;
        if (lane < lanes) {
          tilted_term(genotype[group + lane], mu[group + lane], one_minus_mu[group + lane],
                      mu_times_one_minus_mu[group + lane], t, slopes[lane], curvatures[lane]);
        }
      }
    }
    for (std::size_t lane = 0; lane < kTermLanes; ++lane) {
      k1_lanes[lane] += slopes[lane];
      k2_lanes[lane] += curvatures[lane];
    }
  }
  for (std::size_t lane = 0; lane < kTermLanes; ++lane) {
    *k1 += k1_lanes[lane];
    *k2 += k2_lanes[lane];
  }
}

Cumulants evaluate_slope_and_curvature(const AdjustedTerms& terms, double t) {
  Cumulants out;
  out.k1 = terms.gaussian_variance * t;
  out.k2 = terms.gaussian_variance;
  sum_slope_and_curvature(terms.genotype.data(), terms.mu.data(), terms.one_minus_mu.data(),
                          terms.mu_times_one_minus_mu.data(), terms.genotype.size(), t, &out.k1, &out.k2);
  return out;
}

// One term of K(t): ln(1 - mu + mu e^s) - s mu, the logarithm written so
// that it keeps its precision for any s (as in the file comment).
TAMIS_ALWAYS_INLINE double log_mgf_term(double g, double m, double m_bar, double t) {
  const double s = t * g;
  const bool below = s <= 0.0;
  const double e = expm1_nonpositive(-std::fabs(s));
  const double log_mgf = log1p_nonpositive(pick(below, m, m_bar) * e) + pick(below, 0.0, s);
  return log_mgf - s * m;
}

// The terms' part of K(t), in fixed partial sums like sum_slope_and_curvature.
TAMIS_VECTOR_CLONES
double sum_log_mgf(const double* genotype, const double* mu, const double* one_minus_mu, std::size_t count,
                   double t) {
  double lanes[kTermLanes] = {};
  double terms[kTermLanes];
  for (std::size_t group = 0; group < count; group += kTermLanes) {
    const std::size_t lanes_used = std::min(kTermLanes, count - group);
    if (lanes_used == kTermLanes) {
      for (std::size_t lane = 0; lane < kTermLanes; ++lane) {
        terms[lane] = log_mgf_term(genotype[group + lane], mu[group + lane], one_minus_mu[group + lane], t);
      }
    } else {
      for (std::size_t lane = 0; lane < kTermLanes; ++lane) {
        terms[lane] = lane < lanes_used
                          ? log_mgf_term(genotype[group + lane], mu[group + lane], one_minus_mu[group + lane], t)
                          : 0.0;
      }
    }
    for (std::size_t lane = 0; lane < kTermLanes; ++lane) lanes[lane] += terms[lane];
  }
  double sum = 0.0;
  for (std::size_t lane = 0; lane < kTermLanes; ++lane) sum += lanes[lane];
  return sum;
}

// K(t).
double log_mgf_sum(const AdjustedTerms& terms, double t) {
  return 0.5 * terms.gaussian_variance * t * t +
         sum_log_mgf(terms.genotype.data(), terms.mu.data(), terms.one_minus_mu.data(), terms.genotype.size(), t);
}

// Solves K'(zeta) = x for x strictly inside (smallest, largest value of U).
// `at_zeta` receives K' and K'' there (from the last iteration when it ends
// on the root, which saves evaluating them again).
bool find_saddlepoint(const AdjustedTerms& terms, double x, double* zeta, Cumulants* at_zeta) {
  // K'(0) = 0, so the root lies on the side of x's sign.
  double lo = x > 0.0 ? 0.0 : -kInfinity;
  double hi = x > 0.0 ? kInfinity : 0.0;
  const double scale = std::sqrt(terms.variance);
  // Newton's method from the root of the normal approximation K'(t) ~ t K''(0),
  // which is close for all but the most skewed variants.
  double t = x / terms.variance;
  for (int iteration = 0; iteration < 500; ++iteration) {
    const Cumulants c = evaluate_slope_and_curvature(terms, t);
    const double f = c.k1 - x;
    if (!std::isfinite(f)) return false;
    if (std::fabs(f) <= 1e-15 * (scale + std::fabs(x))) {
      *zeta = t;
      *at_zeta = c;
      return true;
    }
    if (f < 0.0) lo = t; else hi = t;
    double next = c.k2 > 0.0 ? t - f / c.k2 : kInfinity;
    if (!(next > lo && next < hi) || !std::isfinite(next)) {
      if (std::isfinite(lo) && std::isfinite(hi)) {
        next = 0.5 * (lo + hi);
      } else {
        // One side still open: step out geometrically from the closed side.
        const double closed = std::isfinite(lo) ? lo : hi;
        const double direction = std::isfinite(lo) ? 1.0 : -1.0;
        next = closed + direction * (std::fabs(closed) + 1.0);
      }
    }
    if (std::fabs(next - t) <= 1e-14 * std::fabs(t)) {
      *zeta = next;
      *at_zeta = evaluate_slope_and_curvature(terms, next);
      return true;
    }
    t = next;
  }
  return false;
}

// ln of the probability that U takes its largest (upper) or smallest value:
// the one outcome with every Y_i at the matching end.
double log_extreme_point_mass(const AdjustedTerms& terms, bool upper) {
  double sum = 0.0;
  for (std::size_t term_idx = 0; term_idx < terms.genotype.size(); ++term_idx) {
    const bool wants_case = (terms.genotype[term_idx] > 0.0) == upper;
    sum += std::log(wants_case ? terms.mu[term_idx] : terms.one_minus_mu[term_idx]);
  }
  return sum;
}

double log_add(double a, double b) {
  if (a == -kInfinity) return b;
  if (b == -kInfinity) return a;
  const double high = std::fmax(a, b);
  return high + std::log1p(std::exp(-std::fabs(a - b)));
}

bool log_tail_of_terms(const AdjustedTerms& terms, double x, double* log_tail) {
  const bool upper = x > 0.0;
  if (!(terms.variance > 0.0)) return false;
  if (terms.gaussian_variance == 0.0) {  // U is bounded: x may lie at or beyond its edge
    const double edge = upper ? terms.largest_value : terms.smallest_value;
    const double beyond = upper ? x - edge : edge - x;  // > 0: x cannot be reached
    const double tolerance = 1e-12 * (terms.largest_value - terms.smallest_value);
    if (beyond > tolerance) {
      *log_tail = -kInfinity;
      return true;
    }
    if (beyond >= -tolerance) {
      *log_tail = log_extreme_point_mass(terms, upper);
      return std::isfinite(*log_tail);
    }
  }
  const double sd = std::sqrt(terms.variance);
  if (std::fabs(x) <= 1e-6 * sd) {
    // At the centre the formula's 0/0 is removable and the tail is ~1/2.
    *log_tail = log_normal_upper_tail(std::fabs(x) / sd);
    return true;
  }
  double zeta = 0.0;
  Cumulants c;
  if (!find_saddlepoint(terms, x, &zeta, &c)) return false;
  c.k = log_mgf_sum(terms, zeta);
  const double exponent = zeta * x - c.k;  // >= 0: the convex conjugate of K at x
  if (!(exponent > 0.0) || !(c.k2 > 0.0)) return false;
  const double w = (upper ? 1.0 : -1.0) * std::sqrt(2.0 * exponent);
  const double v = zeta * std::sqrt(c.k2);
  const double ratio = v / w;
  if (!(ratio > 0.0) || !std::isfinite(ratio)) return false;
  const double adjusted_w = w + std::log(ratio) / w;
  *log_tail = log_normal_upper_tail(upper ? adjusted_w : -adjusted_w);
  return std::isfinite(*log_tail) && *log_tail <= 0.0;
}

SaddlepointResult normal_result(double u, double v, bool fell_back) {
  SaddlepointResult result;
  result.log_p = log_chisq1_upper_tail(u * u / v);
  result.used_saddlepoint = false;
  result.fell_back = fell_back;
  return result;
}

}  // namespace

SaddlepointContext::SaddlepointContext(const NullModel& model) {
  assert(model.kind == TraitKind::binary);
  const Eigen::Index n = model.sample_count();
  mu_ = model.fitted;
  one_minus_mu_.resize(n);
  Eigen::VectorXd root_w(n);
  for (Eigen::Index sample_idx = 0; sample_idx < n; ++sample_idx) {
    const double m = mu_[sample_idx];
    const double w = model.weights[sample_idx];
    one_minus_mu_[sample_idx] = m > 0.0 ? w / m : 1.0;
    root_w[sample_idx] = std::sqrt(w);
  }
  weighted_basis_ = root_w.asDiagonal() * model.basis;
  unweighted_basis_ = root_w.cwiseInverse().asDiagonal() * model.basis;
}

void SaddlepointContext::adjust_genotype(const Eigen::VectorXd& genotype,
                                         Eigen::VectorXd& adjusted) const {
  assert(genotype.size() == mu_.size());
  const Eigen::VectorXd coordinates = weighted_basis_.transpose() * genotype;
  adjusted = genotype - unweighted_basis_ * coordinates;
}

double SaddlepointContext::bernoulli_variance(const Eigen::VectorXd& genotype) const {
  // With gt = g - X (X'WX)^-1 X'W g: gt'W gt = g'W g - |Q'W^1/2 g|^2.
  const Eigen::VectorXd coordinates = weighted_basis_.transpose() * genotype;
  double weighted_squares = 0.0;
  for (Eigen::Index idx = 0; idx < genotype.size(); ++idx) {
    weighted_squares += genotype[idx] * genotype[idx] * mu_[idx] * one_minus_mu_[idx];
  }
  return std::max(0.0, weighted_squares - coordinates.squaredNorm());
}

// The carriers' exact terms plus the normal part of the non-carriers: the
// adjusted genotype is needed only where g != 0 (coordinates Q'W^1/2 g from
// the carriers alone), and the non-carriers' variance is what is left of V.
detail::AdjustedTerms SaddlepointContext::collect_carrier_terms(const Eigen::VectorXd& genotype,
                                                                double variance_v) const {
  const Eigen::Index n = genotype.size();
  const Eigen::Index p = weighted_basis_.cols();
  std::vector<Eigen::Index> carriers;
  Eigen::VectorXd coordinates = Eigen::VectorXd::Zero(p);
  for (Eigen::Index sample_idx = 0; sample_idx < n; ++sample_idx) {
    if (genotype[sample_idx] == 0.0) continue;
    carriers.push_back(sample_idx);
    coordinates += genotype[sample_idx] * weighted_basis_.row(sample_idx).transpose();
  }
  if (static_cast<std::size_t>(n) - carriers.size() < kMinimumNormalPart) {
    const Eigen::VectorXd adjusted = genotype - unweighted_basis_ * coordinates;
    return collect_terms(adjusted, mu_, one_minus_mu_);
  }
  AdjustedTerms terms;
  reserve_terms(terms, carriers.size());
  double carrier_variance = 0.0;
  for (const Eigen::Index sample_idx : carriers) {
    const double adjusted = genotype[sample_idx] - unweighted_basis_.row(sample_idx).dot(coordinates);
    if (adjusted == 0.0) continue;
    add_term(terms, adjusted, mu_[sample_idx], one_minus_mu_[sample_idx]);
    carrier_variance += adjusted * adjusted * mu_[sample_idx] * one_minus_mu_[sample_idx];
  }
  // What the carriers leave of V belongs to the non-carriers; a remainder at
  // rounding level is no part at all.
  const double rest = variance_v - carrier_variance;
  if (rest > 1e-12 * variance_v) {
    add_gaussian_part(terms, rest);
  }
  return terms;
}

bool saddlepoint_log_tail(const Eigen::VectorXd& adjusted, const Eigen::VectorXd& mu,
                          const Eigen::VectorXd& one_minus_mu, double x, double* log_tail,
                          double gaussian_variance) {
  AdjustedTerms terms = collect_terms(adjusted, mu, one_minus_mu);
  add_gaussian_part(terms, gaussian_variance);
  return log_tail_of_terms(terms, x, log_tail);
}

SaddlepointResult saddlepoint_score_log_p(const SaddlepointContext& context,
                                          const Eigen::VectorXd& genotype, double score_u,
                                          double variance_v, double normal_cutoff) {
  if (!(variance_v > 0.0) || !std::isfinite(variance_v) || !std::isfinite(score_u)) {
    return SaddlepointResult{};  // nothing to test: p = 1
  }
  const double abs_u = std::fabs(score_u);
  if (abs_u / std::sqrt(variance_v) < normal_cutoff) {
    return normal_result(score_u, variance_v, false);
  }
  const AdjustedTerms terms = context.collect_carrier_terms(genotype, variance_v);
  double log_upper = 0.0, log_lower = 0.0;
  if (!log_tail_of_terms(terms, abs_u, &log_upper) || !log_tail_of_terms(terms, -abs_u, &log_lower)) {
    return normal_result(score_u, variance_v, true);
  }
  const double log_p = log_add(log_upper, log_lower);
  if (!std::isfinite(log_p)) return normal_result(score_u, variance_v, true);
  SaddlepointResult result;
  result.log_p = std::fmin(log_p, 0.0);
  result.used_saddlepoint = true;
  return result;
}

SaddlepointResult saddlepoint_score_log_p(const NullModel& model, const Eigen::VectorXd& genotype,
                                          double score_u, double variance_v,
                                          double normal_cutoff) {
  const SaddlepointContext context(model);
  return saddlepoint_score_log_p(context, genotype, score_u, variance_v, normal_cutoff);
}

}  // namespace tamis
