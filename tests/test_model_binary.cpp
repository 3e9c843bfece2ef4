// Tests of the binary-trait statistics and trait helpers of the model stage:
// the saddlepoint approximation of the score test, Firth's penalised refit,
// the Hardy-Weinberg exact test, the rank-based inverse normal transform and
// the normal distribution functions they use.
//
// Outside references: R 4.2.2 (tests/reference/binary_reference.R prints the
// R constants below), SciPy 1.10.1 from python3-scipy (tests/reference/
// firth_reference.py prints the Firth constants), and exact distributions
// computed here by full enumeration or closed-form convolution.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <iostream>
#include <limits>
#include <numeric>
#include <string>
#include <utility>
#include <vector>

#include "model/vector_math.hpp"
#include "tamis/confirm.hpp"
#include "tamis/distributions.hpp"
#include "tamis/firth.hpp"
#include "tamis/hardy_weinberg.hpp"
#include "tamis/null_model.hpp"
#include "tamis/saddlepoint.hpp"
#include "tamis/score_kernel.hpp"
#include "tamis/trait_transform.hpp"

namespace tamis {
namespace {

constexpr double kInfinity = std::numeric_limits<double>::infinity();

double relative_error(double got, double want) {
  if (want == 0.0) return std::fabs(got);
  return std::fabs(got - want) / std::fabs(want);
}

double log_add(double a, double b) {
  if (a == -kInfinity) return b;
  if (b == -kInfinity) return a;
  return std::fmax(a, b) + std::log1p(std::exp(-std::fabs(a - b)));
}

// xoshiro256** seeded through splitmix64: the simulations' fixed-seed generator.
class Xoshiro {
 public:
  explicit Xoshiro(std::uint64_t seed) {
    for (std::uint64_t& word : state_) {
      seed += 0x9E3779B97F4A7C15ULL;
      std::uint64_t z = seed;
      z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
      z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
      word = z ^ (z >> 31);
    }
  }
  std::uint64_t next() {
    const std::uint64_t result = rotate(state_[1] * 5, 7) * 9;
    const std::uint64_t shifted = state_[1] << 17;
    state_[2] ^= state_[0];
    state_[3] ^= state_[1];
    state_[1] ^= state_[2];
    state_[0] ^= state_[3];
    state_[2] ^= shifted;
    state_[3] = rotate(state_[3], 45);
    return result;
  }
  double uniform() { return (static_cast<double>(next() >> 11) + 0.5) * (1.0 / 9007199254740992.0); }
  double normal() {
    const double radius = std::sqrt(-2.0 * std::log(uniform()));
    return radius * std::cos(6.283185307179586 * uniform());
  }

 private:
  static std::uint64_t rotate(std::uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  std::uint64_t state_[4];
};

double logistic(double eta) { return 1.0 / (1.0 + std::exp(-eta)); }

// A logistic null model with the given fitted probabilities. The saddlepoint
// approximates the law of U = sum gt_i (Y_i - mu_i), Y_i ~ Bernoulli(mu_i),
// for any fixed mu, so the accuracy tests choose mu directly rather than
// through a fitted trait.
NullModel model_with_probabilities(const Eigen::MatrixXd& design, const Eigen::VectorXd& mu) {
  NullModel model;
  model.kind = TraitKind::binary;
  model.design = design;
  model.fitted = mu;
  model.weights = mu.array() * (1.0 - mu.array());
  model.y = Eigen::VectorXd::Zero(mu.size());
  model.residuals = -mu;
  const Eigen::MatrixXd weighted = model.weights.cwiseSqrt().asDiagonal() * design;
  const Eigen::HouseholderQR<Eigen::MatrixXd> qr(weighted);
  model.basis = qr.householderQ() * Eigen::MatrixXd::Identity(design.rows(), design.cols());
  model.coefficients = Eigen::VectorXd::Zero(design.cols());
  return model;
}

// gt = g - X (X'WX)^-1 X'W g from the normal equations: an independent route
// to the adjusted genotype (the library goes through the basis Q).
Eigen::VectorXd adjust_by_normal_equations(const Eigen::MatrixXd& design, const Eigen::VectorXd& w,
                                           const Eigen::VectorXd& g) {
  const Eigen::MatrixXd xtwx = design.transpose() * w.asDiagonal() * design;
  const Eigen::VectorXd coefficients = xtwx.ldlt().solve(design.transpose() * (w.array() * g.array()).matrix());
  return g - design * coefficients;
}

// The exact law of U over all 2^n outcomes, sorted by value, with running
// sums for its tails.
class EnumeratedLaw {
 public:
  EnumeratedLaw(const Eigen::VectorXd& adjusted, const Eigen::VectorXd& mu) {
    const int n = static_cast<int>(adjusted.size());
    std::vector<std::pair<double, double>> outcomes;
    outcomes.reserve(std::size_t{1} << n);
    for (std::uint32_t pattern = 0; pattern < (1u << n); ++pattern) {
      double value = 0.0;
      double probability = 1.0;
      for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
        const bool is_case = (pattern >> sample_idx) & 1u;
        value += adjusted[sample_idx] * ((is_case ? 1.0 : 0.0) - mu[sample_idx]);
        probability *= is_case ? mu[sample_idx] : 1.0 - mu[sample_idx];
      }
      outcomes.emplace_back(value, probability);
    }
    std::sort(outcomes.begin(), outcomes.end());
    values_.reserve(outcomes.size());
    at_or_below_.reserve(outcomes.size());
    double running = 0.0;
    for (const auto& [value, probability] : outcomes) {
      running += probability;
      values_.push_back(value);
      at_or_below_.push_back(running);
    }
    at_or_above_.assign(outcomes.size(), 0.0);
    running = 0.0;
    for (std::size_t idx = outcomes.size(); idx-- > 0;) {
      running += outcomes[idx].second;
      at_or_above_[idx] = running;
    }
  }

  const std::vector<double>& values() const { return values_; }

  // P(U >= x) and P(U <= x), with a relative slack so that an atom computed
  // with rounding is still counted at its own value.
  double upper_tail(double x) const {
    const auto it = std::lower_bound(values_.begin(), values_.end(), x - 1e-9 * std::fabs(x));
    return it == values_.end() ? 0.0 : at_or_above_[static_cast<std::size_t>(it - values_.begin())];
  }
  double lower_tail(double x) const {
    const auto it = std::upper_bound(values_.begin(), values_.end(), x + 1e-9 * std::fabs(x));
    return it == values_.begin() ? 0.0 : at_or_below_[static_cast<std::size_t>(it - values_.begin()) - 1];
  }

 private:
  std::vector<double> values_;
  std::vector<double> at_or_below_;
  std::vector<double> at_or_above_;
};

// ---------------------------------------------------------------------------
// Normal distribution helpers
// ---------------------------------------------------------------------------

TEST(NormalDistribution, QuantileMatchesR) {
  // R 4.2.2 stats::qnorm(p)
  const double p[] = {1e-300, 9.9999999999999995e-21, 1.0000000000000001e-05, 0.01, 0.024250000000000001,
                      0.29999999999999999, 0.5, 0.69999999999999996, 0.97499999999999998, 0.99999990000000005};
  const double want[] = {-37.047096299361201, -9.2623400897984052, -4.2648907939228256, -2.3263478740408408,
                         -1.9729610513118845, -0.52440051270804067, 0, 0.52440051270804067,
                         1.9599639845400536, 5.1993375822906618};
  for (int k = 0; k < 10; ++k) {
    if (want[k] == 0.0) {
      EXPECT_EQ(normal_quantile(p[k]), 0.0);
    } else {
      EXPECT_LE(relative_error(normal_quantile(p[k]), want[k]), 1e-14) << p[k];
    }
  }
  EXPECT_EQ(normal_quantile(0.0), -kInfinity);
  EXPECT_EQ(normal_quantile(1.0), kInfinity);
  EXPECT_THROW(normal_quantile(1.5), std::domain_error);
}

TEST(NormalDistribution, LogUpperTailMatchesR) {
  // R 4.2.2 stats::pnorm(z, lower.tail = FALSE, log.p = TRUE)
  const double z[] = {-3, -0.5, 0, 0.5, 3, 10, 40, 300};
  const double want[] = {-0.0013508099647481938, -0.36894641528865652, -0.69314718055994529,
                         -1.1759117615936185,    -6.6077262215103492,  -53.23128515051247,
                         -804.6084420137538,     -45006.62273211866};
  for (int k = 0; k < 8; ++k) {
    EXPECT_LE(relative_error(log_normal_upper_tail(z[k]), want[k]), 1e-12) << z[k];
  }
  EXPECT_LE(std::fabs(log_normal_upper_tail(-40.0)), 1e-300);  // R: -0
  // Round trip through the quantile (formula: P(Z > Phi^-1(1 - p)) = p).
  for (double log_p : {-1.0, -10.0, -100.0, -600.0}) {
    const double z_value = -normal_quantile(std::exp(log_p));
    EXPECT_LE(relative_error(log_normal_upper_tail(z_value), log_p), 1e-12) << log_p;
  }
}

// ---------------------------------------------------------------------------
// Saddlepoint approximation
// ---------------------------------------------------------------------------

struct SmallCohort {
  Eigen::MatrixXd design;
  Eigen::VectorXd mu;
  Eigen::VectorXd genotype;
};

// n = 20, an intercept and one covariate, mu from 0.012 to 0.11, and three
// carriers, so that U's exact upper tail passes through 1e-4 with a lattice
// of carrier outcomes smeared by the non-carriers.
SmallCohort make_small_cohort() {
  const int n = 20;
  SmallCohort cohort;
  cohort.design.resize(n, 2);
  cohort.mu.resize(n);
  cohort.genotype = Eigen::VectorXd::Zero(n);
  for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
    const double covariate = (sample_idx - 9.5) / 5.77;
    cohort.design(sample_idx, 0) = 1.0;
    cohort.design(sample_idx, 1) = covariate;
    cohort.mu[sample_idx] = logistic(-3.2 + 0.75 * covariate);
  }
  cohort.genotype[2] = 1.0;
  cohort.genotype[9] = 1.0;
  cohort.genotype[15] = 1.0;
  cohort.genotype[17] = 2.0;
  return cohort;
}

TEST(Saddlepoint, AdjustedGenotypeMatchesNormalEquations) {
  const SmallCohort cohort = make_small_cohort();
  const NullModel model = model_with_probabilities(cohort.design, cohort.mu);
  const SaddlepointContext context(model);
  Eigen::VectorXd adjusted;
  context.adjust_genotype(cohort.genotype, adjusted);
  const Eigen::VectorXd want = adjust_by_normal_equations(cohort.design, model.weights, cohort.genotype);
  // Formula: gt = g - X (X'WX)^-1 X'W g, so X'W gt = 0.
  EXPECT_LE((adjusted - want).cwiseAbs().maxCoeff(), 1e-13);
  EXPECT_LE((cohort.design.transpose() * (model.weights.array() * adjusted.array()).matrix()).norm(), 1e-13);
}

// The exact law of S = sum gt_i Y_i for integer gt by convolution over the
// samples (dynamic programming on the integer lattice): probability of each S
// from sum(negative gt) upwards.
struct LatticeLaw {
  int smallest = 0;
  std::vector<double> probabilities;
};
LatticeLaw convolve_integer_scores(const Eigen::VectorXd& adjusted, const Eigen::VectorXd& mu) {
  LatticeLaw law;
  int largest = 0;
  for (Eigen::Index sample_idx = 0; sample_idx < adjusted.size(); ++sample_idx) {
    const int value = static_cast<int>(adjusted[sample_idx]);
    (value < 0 ? law.smallest : largest) += value;
  }
  law.probabilities.assign(static_cast<std::size_t>(largest - law.smallest + 1), 0.0);
  law.probabilities[static_cast<std::size_t>(-law.smallest)] = 1.0;
  std::vector<double> next(law.probabilities.size());
  for (Eigen::Index sample_idx = 0; sample_idx < adjusted.size(); ++sample_idx) {
    const int shift = static_cast<int>(adjusted[sample_idx]);
    std::fill(next.begin(), next.end(), 0.0);
    for (std::size_t sum_idx = 0; sum_idx < next.size(); ++sum_idx) {
      const double mass = law.probabilities[sum_idx];
      if (mass == 0.0) continue;
      next[sum_idx] += (1.0 - mu[sample_idx]) * mass;
      next[static_cast<std::size_t>(static_cast<int>(sum_idx) + shift)] += mu[sample_idx] * mass;
    }
    law.probabilities.swap(next);
  }
  return law;
}

TEST(Saddlepoint, TailsMatchExactConvolution) {
  // A rare variant in n = 1000: 40 carriers with imputed-dosage-like adjusted
  // values 20..60 and 960 non-carriers at -1 or -2 (integers, so that the
  // exact law is a finite convolution), mu from 0.005 to 0.093.
  const int n = 1000;
  Eigen::VectorXd mu(n), one_minus_mu(n), adjusted(n);
  for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
    const double covariate = -1.7 + 3.4 * ((sample_idx * 389) % n) / (n - 1.0);
    mu[sample_idx] = logistic(-3.5 + covariate);
    one_minus_mu[sample_idx] = 1.0 - mu[sample_idx];
    adjusted[sample_idx] = sample_idx % 25 == 7 ? 20.0 + (sample_idx * 13) % 41 : -1.0 - sample_idx % 2;
  }
  // Exact reference: the law of S = U + sum gt mu by convolution.
  const LatticeLaw law = convolve_integer_scores(adjusted, mu);
  const double centre = adjusted.dot(mu);
  const double sd = std::sqrt((mu.array() * one_minus_mu.array() * adjusted.array().square()).sum());
  std::vector<double> at_or_above(law.probabilities.size() + 1, 0.0);
  for (std::size_t sum_idx = law.probabilities.size(); sum_idx-- > 0;) {
    at_or_above[sum_idx] = at_or_above[sum_idx + 1] + law.probabilities[sum_idx];
  }
  int compared = 0;
  double worst = 0.0, worst_normal = 0.0;
  for (std::size_t sum_idx = 0; sum_idx < law.probabilities.size(); ++sum_idx) {
    const double exact = at_or_above[sum_idx];
    if (exact < 1e-5 || exact > 1e-3) continue;
    // Half-way below the lattice point: P(U >= x) is the same anywhere in the gap.
    const double x = static_cast<double>(law.smallest + static_cast<int>(sum_idx)) - 0.5 - centre;
    double log_tail = 0.0;
    ASSERT_TRUE(saddlepoint_log_tail(adjusted, mu, one_minus_mu, x, &log_tail));
    const double error = relative_error(std::exp(log_tail), exact);
    worst = std::max(worst, error);
    worst_normal = std::max(worst_normal, relative_error(std::exp(log_normal_upper_tail(x / sd)), exact));
    EXPECT_LE(error, 0.10) << "x = " << x << ": saddlepoint " << std::exp(log_tail) << ", exact " << exact;
    ++compared;
  }
  std::cout << "[ accuracy ] saddlepoint upper tail vs exact convolution (n = 1000, 40 carriers), "
            << compared << " points with p in [1e-5, 1e-3]: max relative error " << worst
            << " (normal approximation: " << worst_normal << ")\n";
  EXPECT_GE(compared, 50);
  EXPECT_GE(worst_normal, 0.5);  // the skewness the saddlepoint corrects is really there
}

// The smallest |u| at which the test's p reaches alpha (p falls as |u| grows).
double critical_score(const SaddlepointContext& context, const Eigen::VectorXd& genotype, double variance,
                      double alpha, bool use_normal) {
  double lo = 0.0, hi = 1e3 * std::sqrt(variance);
  for (int iteration = 0; iteration < 200; ++iteration) {
    const double mid = 0.5 * (lo + hi);
    const double log_p = use_normal ? log_chisq1_upper_tail(mid * mid / variance)
                                    : saddlepoint_score_log_p(context, genotype, mid, variance).log_p;
    (log_p > std::log(alpha) ? lo : hi) = mid;
  }
  return hi;
}

TEST(Saddlepoint, ExactSizeOnALatticeMatchesEnumeration) {
  // Hard-called rare variant in n = 20 (4 carriers, mu 0.012-0.11): U is
  // nearly a lattice, so pointwise tails jump; what a test needs is its size.
  // Exact reference: the law of U by enumeration of all 2^20 outcomes; the
  // exact size of "reject when p <= alpha" is P(|U| >= u_alpha).
  const SmallCohort cohort = make_small_cohort();
  const NullModel model = model_with_probabilities(cohort.design, cohort.mu);
  const SaddlepointContext context(model);
  Eigen::VectorXd adjusted;
  context.adjust_genotype(cohort.genotype, adjusted);
  const double variance = (model.weights.array() * adjusted.array().square()).sum();
  const EnumeratedLaw law(adjusted, cohort.mu);
  for (double alpha : {1e-3, 1e-4}) {
    const double spa_u = critical_score(context, cohort.genotype, variance, alpha, false);
    const double normal_u = critical_score(context, cohort.genotype, variance, alpha, true);
    const double spa_size = law.upper_tail(spa_u) + law.lower_tail(-spa_u);
    const double normal_size = law.upper_tail(normal_u) + law.lower_tail(-normal_u);
    std::cout << "[ accuracy ] exact size at alpha " << alpha << " (n = 20 enumeration): saddlepoint "
              << spa_size << ", normal " << normal_size << "\n";
    EXPECT_LE(relative_error(spa_size, alpha), 0.15) << alpha;
    EXPECT_GE(normal_size, 5.0 * alpha) << alpha;
  }
}

TEST(Saddlepoint, KernelScoreEqualsAdjustedGenotypeScore) {
  // At the logistic MLE X'r = 0, so G'r = gt'r and V = sum w gt^2 (formula).
  Xoshiro random(11);
  const int n = 400;
  Eigen::MatrixXd design(n, 3);
  Eigen::VectorXd y(n), g(n);
  for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
    design(sample_idx, 0) = 1.0;
    design(sample_idx, 1) = random.normal();
    design(sample_idx, 2) = random.uniform() < 0.5 ? 1.0 : 0.0;
    y[sample_idx] = random.uniform() < logistic(-2.0 + 0.5 * design(sample_idx, 1)) ? 1.0 : 0.0;
    g[sample_idx] = random.uniform() < 0.05 ? 1.0 : 0.0;
  }
  const NullModel model = fit_null_model("trait", TraitKind::binary, y, design, {"intercept", "x", "z"});
  ScoreKernel kernel(model);
  ScoreScratch scratch;
  ScoreResult score;
  kernel.compute(g.data(), 1, scratch, &score);
  const SaddlepointContext context(model);
  Eigen::VectorXd adjusted;
  context.adjust_genotype(g, adjusted);
  EXPECT_LE(relative_error(adjusted.dot(model.residuals), score.u), 1e-9);
  EXPECT_LE(relative_error((model.weights.array() * adjusted.array().square()).sum(), score.v), 1e-12);
}

// The closed-form law of U when every sample has the same mu (intercept-only
// model) and the carriers all carry one copy: gt = g - m/n, so
//   U = (1 - m/n)(Kc - m mu) - (m/n)(Kn - (n - m) mu),
// Kc ~ Bin(m, mu) and Kn ~ Bin(n - m, mu) independent. ln P(U >= x) is summed
// in log space over Kc, each term with the binomial CDF of Kn.
double log_binomial_pmf(int k, int size, double prob) {
  return std::lgamma(size + 1.0) - std::lgamma(k + 1.0) - std::lgamma(size - k + 1.0) +
         k * std::log(prob) + (size - k) * std::log1p(-prob);
}
double log_binomial_cdf(int k, int size, double prob) {
  if (k < 0) return -kInfinity;
  double sum = -kInfinity;
  for (int count = 0; count <= std::min(k, size); ++count) sum = log_add(sum, log_binomial_pmf(count, size, prob));
  return std::min(sum, 0.0);
}
double exact_log_upper_tail_equal_mu(int n, int m, double mu, double x) {
  const double share = static_cast<double>(m) / n;
  double log_tail = -kInfinity;
  for (int carrier_cases = 0; carrier_cases <= m; ++carrier_cases) {
    // U >= x  <=>  Kn <= [(1 - share)(kc - m mu) + share (n - m) mu - x] / share
    const double bound = ((1.0 - share) * (carrier_cases - m * mu) + share * (n - m) * mu - x) / share;
    const int largest = static_cast<int>(std::floor(bound + 1e-9));
    if (largest < 0) continue;
    log_tail = log_add(log_tail, log_binomial_pmf(carrier_cases, m, mu) + log_binomial_cdf(largest, n - m, mu));
  }
  return log_tail;
}

TEST(Saddlepoint, FarTailsInLogSpaceMatchClosedFormLaw) {
  const int n = 5000, m = 200;
  const double mu = 0.01;
  const NullModel model = model_with_probabilities(Eigen::MatrixXd::Ones(n, 1), Eigen::VectorXd::Constant(n, mu));
  const SaddlepointContext context(model);
  Eigen::VectorXd g = Eigen::VectorXd::Zero(n);
  for (int carrier_idx = 0; carrier_idx < m; ++carrier_idx) g[carrier_idx * (n / m)] = 1.0;
  const double share = static_cast<double>(m) / n;
  const double variance = mu * (1.0 - mu) * (m * (1.0 - share) * (1.0 - share) + (n - m) * share * share);
  double previous = 0.0;
  for (int carrier_cases : {12, 30, 60, 120, 190}) {
    // u as observed with `carrier_cases` carrier cases and the expected number of other cases.
    const double u = (1.0 - share) * (carrier_cases - m * mu);
    const SaddlepointResult result = saddlepoint_score_log_p(context, g, u, variance);
    // The lower tail cannot reach -u here (U >= -(1 - share) m mu - ...), so the
    // two-sided p is the upper tail.
    const double exact = exact_log_upper_tail_equal_mu(n, m, mu, u);
    ASSERT_TRUE(std::isfinite(result.log_p));
    EXPECT_TRUE(result.used_saddlepoint);
    EXPECT_LT(result.log_p, previous);
    previous = result.log_p;
    std::cout << "[ accuracy ] closed-form law, " << carrier_cases << " carrier cases: ln p exact " << exact
              << ", saddlepoint " << result.log_p << " (p ratio " << std::exp(result.log_p - exact) << ")\n";
    // On this lattice the tail at an atom includes the atom, which the smooth
    // approximation splits: agreement within a factor of 2 (0.3 in -log10 p),
    // loosened by 0.1% of ln p where p is below 1e-300.
    EXPECT_LE(std::fabs(result.log_p - exact), std::log(2.0) + 1e-3 * std::fabs(exact)) << carrier_cases;
  }
  EXPECT_LT(previous, std::log(1e-300));  // far below the smallest double, still exact in log space
}

TEST(Saddlepoint, BelowCutoffIsTheNormalApproximation) {
  const SmallCohort cohort = make_small_cohort();
  const NullModel model = model_with_probabilities(cohort.design, cohort.mu);
  const SaddlepointContext context(model);
  const double variance = 0.4;
  const double u = 1.9 * std::sqrt(variance);
  const SaddlepointResult result = saddlepoint_score_log_p(context, cohort.genotype, u, variance);
  EXPECT_FALSE(result.used_saddlepoint);
  EXPECT_FALSE(result.fell_back);
  EXPECT_EQ(result.log_p, log_chisq1_upper_tail(u * u / variance));
}

TEST(Saddlepoint, DegenerateInputsNeverGiveNaN) {
  const SmallCohort cohort = make_small_cohort();
  const NullModel model = model_with_probabilities(cohort.design, cohort.mu);
  const SaddlepointContext context(model);
  const Eigen::VectorXd zeros = Eigen::VectorXd::Zero(20);
  // All-zero genotype: nothing to test.
  SaddlepointResult result = saddlepoint_score_log_p(context, zeros, 0.0, 0.0);
  EXPECT_EQ(result.log_p, 0.0);
  EXPECT_FALSE(result.used_saddlepoint);
  // A genotype in the covariate span (gt = 0) with a rounding-sized V and u.
  const Eigen::VectorXd in_span = 2.0 * cohort.design.col(0) - 0.5 * cohort.design.col(1);
  result = saddlepoint_score_log_p(context, in_span, 1e-14, 1e-30);
  EXPECT_TRUE(std::isfinite(result.log_p));
  EXPECT_LE(result.log_p, 0.0);
  // u beyond anything U can take (every sample a carrier, so no part of U is
  // left to the normal): the saddlepoint does not exist and the result falls back.
  const Eigen::VectorXd dosages = Eigen::VectorXd::LinSpaced(20, 0.1, 1.9);
  Eigen::VectorXd adjusted;
  context.adjust_genotype(dosages, adjusted);
  const double variance = (model.weights.array() * adjusted.array().square()).sum();
  result = saddlepoint_score_log_p(context, dosages, 1e3, variance);
  EXPECT_TRUE(std::isfinite(result.log_p));
  EXPECT_TRUE(result.fell_back);
  EXPECT_FALSE(result.used_saddlepoint);
  // Non-finite input.
  result = saddlepoint_score_log_p(context, dosages, std::nan(""), variance);
  EXPECT_EQ(result.log_p, 0.0);
}

TEST(Saddlepoint, ExtremeProbabilitiesMatchEnumeration) {
  // mu from 1e-9 to 1 - 1e-9: the tilted terms must neither overflow nor cancel.
  const int n = 16;
  Eigen::MatrixXd design(n, 2);
  Eigen::VectorXd mu(n), g = Eigen::VectorXd::Zero(n);
  for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
    const double covariate = (sample_idx - 7.5) / 4.6;
    design(sample_idx, 0) = 1.0;
    design(sample_idx, 1) = covariate;
    mu[sample_idx] = logistic(-4.0 + 11.0 * covariate);  // 1e-9 ... 1 - 1e-5
  }
  mu[0] = 1e-9;
  mu[n - 1] = 1.0 - 1e-9;
  for (int sample_idx : {1, 4, 6, 8, 13}) g[sample_idx] = 1.0;
  const NullModel model = model_with_probabilities(design, mu);
  const SaddlepointContext context(model);
  Eigen::VectorXd adjusted;
  context.adjust_genotype(g, adjusted);
  const double variance = (model.weights.array() * adjusted.array().square()).sum();
  const EnumeratedLaw law(adjusted, mu);  // exact reference: all 2^16 outcomes
  for (double z_score = 0.0; z_score < 12.0; z_score += 0.05) {
    for (double sign : {1.0, -1.0}) {
      const SaddlepointResult result =
          saddlepoint_score_log_p(context, g, sign * z_score * std::sqrt(variance), variance);
      ASSERT_TRUE(std::isfinite(result.log_p)) << z_score;
      ASSERT_LE(result.log_p, 0.0) << z_score;
    }
  }
  for (double alpha : {1e-2, 1e-3}) {
    // Exact reference: the enumerated law; size as in the lattice test above.
    const double spa_u = critical_score(context, g, variance, alpha, false);
    const double spa_size = law.upper_tail(spa_u) + law.lower_tail(-spa_u);
    // The largest size at most alpha that any test on |U| can have here.
    double attainable = 0.0;
    for (const double value : law.values()) {
      const double size = law.upper_tail(std::fabs(value)) + law.lower_tail(-std::fabs(value));
      if (size <= alpha) attainable = std::max(attainable, size);
    }
    std::cout << "[ accuracy ] extreme mu, exact size at alpha " << alpha << " (n = 16 enumeration): "
              << spa_size << " (largest attainable " << attainable << ")\n";
    // Never anti-conservative beyond 15%; on a law this coarse it may be
    // conservative (it is, about threefold at 1e-3), which the output shows.
    EXPECT_LE(spa_size, 1.15 * alpha) << alpha;
    EXPECT_GT(spa_size, 0.0) << alpha;
  }
}

// ---------------------------------------------------------------------------
// Calibration of the score test for rare variants and a rare binary trait
// ---------------------------------------------------------------------------

// The central 99.9% acceptance region of Bin(size, prob): the smallest k with
// P(X <= k) >= 0.0005 and the smallest with P(X <= k) >= 0.9995 (qbinom's definition).
std::pair<int, int> binomial_bounds(int size, double prob) {
  int lower = -1, upper = -1;
  double log_cdf = -kInfinity;
  for (int k = 0; k <= size && upper < 0; ++k) {
    log_cdf = log_add(log_cdf, log_binomial_pmf(k, size, prob));
    if (lower < 0 && log_cdf >= std::log(0.0005)) lower = k;
    if (log_cdf >= std::log(0.9995)) upper = k;
  }
  return {lower, upper};
}

TEST(Calibration, BinomialBoundsMatchR) {
  // R 4.2.2: qbinom(c(0.0005, 0.9995), size, prob)
  struct Row { int size; double prob; int lower, upper; };
  const Row rows[] = {{4000, 0.01, 21, 62},    {4000, 0.001, 0, 12},   {10000, 0.01, 69, 134},
                      {10000, 0.001, 2, 22},   {20000, 0.01, 155, 248}, {20000, 0.001, 7, 36}};
  for (const Row& row : rows) {
    const auto [lower, upper] = binomial_bounds(row.size, row.prob);
    EXPECT_EQ(lower, row.lower) << row.size << " " << row.prob;
    EXPECT_EQ(upper, row.upper) << row.size << " " << row.prob;
  }
}

struct TypeOneCounts {
  int variants = 0;  // MAC 1..59
  int saddlepoint_below[2] = {0, 0};  // p < 0.01, p < 0.001
  int normal_below[2] = {0, 0};
  int saddlepoint_calls = 0;
  int fell_back = 0;
};

// One simulated null cohort: n samples, three covariates, prevalence ~3%,
// `variant_count` variants with MAF uniform on [0.001, 0.01] drawn
// independently of the trait. Counts p-values below 0.01 and 0.001.
void scan_null_cohort(std::uint64_t seed, int n, int variant_count, TypeOneCounts& counts) {
  Xoshiro random(seed);
  Eigen::MatrixXd design(n, 4);
  Eigen::VectorXd y(n);
  for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
    design(sample_idx, 0) = 1.0;
    design(sample_idx, 1) = random.normal();
    design(sample_idx, 2) = random.uniform() < 0.4 ? 1.0 : 0.0;
    design(sample_idx, 3) = random.normal();
    const double eta = -3.9 + 0.5 * design(sample_idx, 1) + 0.5 * design(sample_idx, 2) -
                       0.4 * design(sample_idx, 3);
    y[sample_idx] = random.uniform() < logistic(eta) ? 1.0 : 0.0;
  }
  const NullModel model =
      fit_null_model("simulated", TraitKind::binary, y, design, {"intercept", "x1", "x2", "x3"});
  const ScoreKernel kernel(model);
  const SaddlepointContext context(model);
  ScoreScratch scratch;
  const int width = 64;
  std::vector<double> block(static_cast<std::size_t>(n) * width);
  std::vector<ScoreResult> scores(width);
  std::vector<int> minor_allele_counts(width);
  Eigen::VectorXd genotype(n);
  const double thresholds[2] = {std::log(0.01), std::log(0.001)};
  for (int block_start = 0; block_start < variant_count; block_start += width) {
    for (int variant_idx = 0; variant_idx < width; ++variant_idx) {
      const double freq = 0.001 + 0.009 * random.uniform();
      const double hom = freq * freq;
      const double het_or_hom = hom + 2.0 * freq * (1.0 - freq);
      int count = 0;
      for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
        const double draw = random.uniform();
        const int dosage = draw < hom ? 2 : (draw < het_or_hom ? 1 : 0);
        block[static_cast<std::size_t>(sample_idx) * width + variant_idx] = dosage;
        count += dosage;
      }
      minor_allele_counts[variant_idx] = count;
    }
    kernel.compute(block.data(), width, scratch, scores.data());
    for (int variant_idx = 0; variant_idx < width; ++variant_idx) {
      const int mac = minor_allele_counts[variant_idx];
      if (mac < 1 || mac >= 60 || !scores[variant_idx].testable) continue;
      for (int sample_idx = 0; sample_idx < n; ++sample_idx) {
        genotype[sample_idx] = block[static_cast<std::size_t>(sample_idx) * width + variant_idx];
      }
      const ScoreResult& score = scores[variant_idx];
      const SaddlepointResult spa = saddlepoint_score_log_p(context, genotype, score.u, score.v);
      ++counts.variants;
      counts.saddlepoint_calls += spa.used_saddlepoint;
      counts.fell_back += spa.fell_back;
      for (int level = 0; level < 2; ++level) {
        counts.saddlepoint_below[level] += spa.log_p < thresholds[level];
        counts.normal_below[level] += score.log_p < thresholds[level];
      }
    }
  }
}

TEST(Calibration, SaddlepointKeepsTypeOneErrorForRareVariantsAndRareTrait) {
  // Method: Dey et al. 2017 (AJHG 101:37-49) show the saddlepoint score test
  // calibrated, and the normal approximation anti-conservative, for rare
  // variants and unbalanced case-control ratios. Check: under the null, the
  // number of p < alpha among N variants is Bin(N, alpha); the counts must lie
  // in its central 99.9% region (binomial_bounds, checked against R's qbinom).
  TypeOneCounts counts;
  for (std::uint64_t cohort_idx = 0; cohort_idx < 3; ++cohort_idx) {
    scan_null_cohort(20240601 + cohort_idx, 3000, 6000, counts);
  }
  const double levels[2] = {0.01, 0.001};
  std::cout << "[ calibration ] " << counts.variants << " null variants with MAC < 60, n = 3000, "
            << "prevalence ~3%; saddlepoint used for " << counts.saddlepoint_calls << ", fell back "
            << counts.fell_back << "\n";
  for (int level = 0; level < 2; ++level) {
    const auto [lower, upper] = binomial_bounds(counts.variants, levels[level]);
    std::cout << "[ calibration ] alpha " << levels[level] << ": expected "
              << counts.variants * levels[level] << ", 99.9% bounds [" << lower << ", " << upper
              << "], saddlepoint " << counts.saddlepoint_below[level] << ", normal "
              << counts.normal_below[level] << "\n";
    EXPECT_GE(counts.saddlepoint_below[level], lower) << levels[level];
    EXPECT_LE(counts.saddlepoint_below[level], upper) << levels[level];
    // The plain normal approximation fails the same check in this setting
    // (too many small p: the score of a rare variant is skewed when cases are rare).
    EXPECT_GT(counts.normal_below[level], upper) << levels[level];
  }
  EXPECT_EQ(counts.fell_back, 0);
}

// ---------------------------------------------------------------------------
// Firth's penalised refit
// ---------------------------------------------------------------------------

// The dataset of tests/reference/firth_reference.py, from the same integer formulas.
struct FirthData {
  Eigen::MatrixXd design;  // intercept, x1, x2
  Eigen::VectorXd y;
  Eigen::VectorXd separated;       // every carrier is a case
  Eigen::VectorXd near_separated;  // all carriers but one are cases
};

FirthData make_firth_data() {
  const int n = 60;
  FirthData data;
  data.design.resize(n, 3);
  data.y.resize(n);
  data.separated.resize(n);
  data.near_separated.resize(n);
  for (int s = 0; s < n; ++s) {
    const double x1 = (((s * 37) % 23) - 11) / 5.0;
    const int x2 = (s * 11 + s / 7) % 2;
    const bool is_case = ((s * s * 7 + s * 5 + 3) % 17) + 3 * x2 + ((s * 37) % 23) / 6 > 14;
    data.design(s, 0) = 1.0;
    data.design(s, 1) = x1;
    data.design(s, 2) = x2;
    data.y[s] = is_case;
    data.separated[s] = is_case && s % 4 == 1;
    data.near_separated[s] = (is_case && s % 5 == 2) || (!is_case && s % 29 == 3);
  }
  return data;
}

struct FirthReference {
  double beta, se, full_value, null_value, lrt;
};

void expect_firth_matches(const FirthResult& got, const FirthReference& want) {
  EXPECT_TRUE(got.converged);
  EXPECT_LE(relative_error(got.beta, want.beta), 1e-4) << "beta " << got.beta;
  EXPECT_LE(relative_error(got.se, want.se), 1e-4) << "se " << got.se;
  EXPECT_LE(relative_error(got.full_penalized_log_likelihood, want.full_value), 1e-4);
  EXPECT_LE(relative_error(got.null_penalized_log_likelihood, want.null_value), 1e-4);
  EXPECT_LE(relative_error(got.lrt_chisq, want.lrt), 1e-4) << "penalised LR " << got.lrt_chisq;
  EXPECT_DOUBLE_EQ(got.wald_chisq, (got.beta / got.se) * (got.beta / got.se));
  EXPECT_EQ(got.lrt_log_p, log_chisq1_upper_tail(got.lrt_chisq));
  std::cout << "[ accuracy ] Firth vs SciPy: beta " << relative_error(got.beta, want.beta) << ", penalised LR "
            << relative_error(got.lrt_chisq, want.lrt) << " (relative), " << got.iterations
            << " iterations (null + full)\n";
}

TEST(Firth, SeparatedVariantMatchesSciPy) {
  const FirthData data = make_firth_data();
  const NullModel model =
      fit_null_model("trait", TraitKind::binary, data.y, data.design, {"intercept", "x1", "x2"});
  const FirthResult result = firth_refit(model, data.separated);
  // SciPy 1.10.1 (python3-scipy), scipy.optimize.minimize BFGS then
  // Nelder-Mead on -l*(b): tests/reference/firth_reference.py.
  expect_firth_matches(result, {3.370379786984093, 1.608514604874871, -29.39968356265957,
                                -34.562097081746415, 10.324827038173694});
  // The ordinary likelihood has no finite maximum here (common practice:
  // separation drives the ML estimate to infinity); Firth's stays finite.
  const ConfirmResult ordinary = confirm_variant(model, data.separated);
  EXPECT_FALSE(ordinary.converged);
  EXPECT_GT(ordinary.beta, 2.0 * result.beta);
}

TEST(Firth, NearSeparatedVariantMatchesSciPy) {
  const FirthData data = make_firth_data();
  const NullModel model =
      fit_null_model("trait", TraitKind::binary, data.y, data.design, {"intercept", "x1", "x2"});
  const FirthResult result = firth_refit(model, data.near_separated);
  // SciPy 1.10.1 (python3-scipy): tests/reference/firth_reference.py.
  expect_firth_matches(result, {2.030599062333197, 1.0142151523968674, -31.561366278842492,
                                -34.48467319972323, 5.8466138417614815});
}

TEST(Firth, GenotypeInCovariateSpanIsNotEstimable) {
  const FirthData data = make_firth_data();
  const NullModel model =
      fit_null_model("trait", TraitKind::binary, data.y, data.design, {"intercept", "x1", "x2"});
  const Eigen::VectorXd in_span = data.design.col(1) * 2.0 + data.design.col(0);
  const FirthResult result = firth_refit(model, in_span);
  EXPECT_FALSE(result.converged);
  EXPECT_EQ(result.lrt_log_p, 0.0);
  EXPECT_EQ(result.wald_log_p, 0.0);
}

// ---------------------------------------------------------------------------
// The saddlepoint's own expm1 and log1p
// ---------------------------------------------------------------------------

// Against glibc's expm1 and log1p (Debian 12, glibc 2.36), which are accurate
// to within an ulp or so (common practice): the saddlepoint's versions must
// stay within three ulps over the whole range it uses, near 0 included.
TEST(VectorMath, Expm1AndLog1pMatchTheLibrary) {
  double worst_expm1 = 0.0, worst_log1p = 0.0;
  for (double magnitude = 1e-300; magnitude < 800.0; magnitude *= 1.0137) {
    for (double x : {-magnitude, -magnitude * 0.7071, -magnitude * 0.3333}) {
      const double want = std::expm1(x);
      worst_expm1 = std::max(worst_expm1, std::fabs(detail::expm1_nonpositive(x) - want) / std::fabs(want));
    }
  }
  for (double magnitude = 1e-300; magnitude < 1.0; magnitude *= 1.0137) {
    // y = -1 itself (ln 0) never arises: the saddlepoint's y is a probability times expm1.
    for (double y : {-magnitude, -magnitude * 0.7071, -(1.0 - std::max(magnitude, 1e-15))}) {
      const double want = std::log1p(y);
      worst_log1p = std::max(worst_log1p, std::fabs(detail::log1p_nonpositive(y) - want) / std::fabs(want));
    }
  }
  // Three ulps (2^-52 is one at 1).
  EXPECT_LE(worst_expm1, 3 * 0x1p-52);
  EXPECT_LE(worst_log1p, 3 * 0x1p-52);
  EXPECT_EQ(detail::expm1_nonpositive(0.0), 0.0);
  EXPECT_EQ(detail::expm1_nonpositive(-1e4), -1.0);
  EXPECT_EQ(detail::log1p_nonpositive(0.0), 0.0);
}

// ---------------------------------------------------------------------------
// Hardy-Weinberg exact test
// ---------------------------------------------------------------------------

// ln p by enumeration of every heterozygote count with the multinomial
// formula P(h) = N! n_A! n_B! 2^h / (n_AA! h! n_BB! (2N)!) (Wigginton et al.
// 2005, eq. 1), independent of the recurrence.
double enumerate_hardy_weinberg_log_p(int hom_ref, int het, int hom_alt) {
  const int n = hom_ref + het + hom_alt;
  const int copies_a = 2 * hom_ref + het, copies_b = 2 * hom_alt + het;
  auto log_prob = [&](int h) {
    const int aa = (copies_a - h) / 2, bb = (copies_b - h) / 2;
    return std::lgamma(n + 1.0) - std::lgamma(aa + 1.0) - std::lgamma(h + 1.0) - std::lgamma(bb + 1.0) +
           h * std::log(2.0) + std::lgamma(copies_a + 1.0) + std::lgamma(copies_b + 1.0) -
           std::lgamma(2.0 * n + 1.0);
  };
  const double observed = log_prob(het);
  double sum = -kInfinity;
  for (int h = copies_a % 2; h <= std::min(copies_a, copies_b); h += 2) {
    if (log_prob(h) <= observed + std::log1p(1e-7)) sum = log_add(sum, log_prob(h));
  }
  return std::min(sum, 0.0);
}

TEST(HardyWeinberg, EveryGenotypeSplitOfTenMatchesEnumeration) {
  for (int hom_ref = 0; hom_ref <= 10; ++hom_ref) {
    for (int het = 0; het + hom_ref <= 10; ++het) {
      const int hom_alt = 10 - hom_ref - het;
      const double want = std::exp(enumerate_hardy_weinberg_log_p(hom_ref, het, hom_alt));
      const double got = hardy_weinberg_exact_p(hom_ref, het, hom_alt);
      EXPECT_NEAR(got, want, 1e-12 * want + 1e-15) << hom_ref << "/" << het << "/" << hom_alt;
      EXPECT_EQ(got, hardy_weinberg_exact_p(hom_alt, het, hom_ref));  // allele labels do not matter
      EXPECT_LE(got, 1.0);
    }
  }
  // Hand check (formula above): 0/2/0 has one possible het count besides 0:
  // P(h=2) = 2! 2! 2! 4 / (2! 4!) = 2/3 and P(h=0) = 1/3, so p(0/2/0) = 1 and p(1/0/1) = 1/3.
  EXPECT_NEAR(hardy_weinberg_exact_p(0, 2, 0), 1.0, 1e-15);
  EXPECT_NEAR(hardy_weinberg_exact_p(1, 0, 1), 1.0 / 3.0, 1e-15);
  EXPECT_EQ(hardy_weinberg_exact_p(0, 0, 0), 1.0);   // no calls
  EXPECT_EQ(hardy_weinberg_exact_p(25, 0, 0), 1.0);  // monomorphic
}

TEST(HardyWeinberg, LargeSamplesMatchEnumeration) {
  // Cohort-sized counts, where the test sums only the states near the mode,
  // and counts so far in the tail that it switches to log space.
  const int splits[][3] = {{3600, 1300, 100}, {4990, 10, 0},  {2500, 0, 2500}, {1250, 2500, 1250},
                           {4000, 990, 10},   {4000, 600, 400}, {1, 4998, 1},  {2000, 2500, 500},
                           {4999, 1, 0},      {3000, 1700, 300}, {1700, 1600, 1700}};
  for (const auto& split : splits) {
    const double want = enumerate_hardy_weinberg_log_p(split[0], split[1], split[2]);
    const double got = hardy_weinberg_exact_log_p(split[0], split[1], split[2]);
    EXPECT_NEAR(got, want, 1e-8 * std::max(1.0, std::fabs(want))) << split[0] << "/" << split[1] << "/" << split[2];
  }
}

TEST(HardyWeinberg, MatchesREnumeration) {
  // R 4.2.2, enumeration with lfactorial: tests/reference/binary_reference.R.
  struct Row { std::uint64_t hom_ref, het, hom_alt; double log_p; };
  const Row rows[] = {{50, 40, 10, -0.45136895238908181},   {10, 0, 10, -13.522615478647992},
                      {300, 150, 50, -11.150768754215173},  {1000, 10, 5, -19.107279641293569},
                      {0, 57, 0, -36.913305760740059},      {120, 230, 90, -1.0848540977135572},
                      {500, 0, 500, -692.80073196962803},   {17, 3, 0, -1.9567680809018384e-14}};
  for (const Row& row : rows) {
    const double got = hardy_weinberg_exact_log_p(row.hom_ref, row.het, row.hom_alt);
    EXPECT_NEAR(got, row.log_p, 1e-10 * std::fabs(row.log_p) + 1e-12)
        << row.hom_ref << "/" << row.het << "/" << row.hom_alt;
  }
  // p below the smallest double stays exact in log space (500/0/500: p ~ 1e-301).
  EXPECT_TRUE(std::isfinite(hardy_weinberg_exact_log_p(5000, 0, 5000)));
  EXPECT_LT(hardy_weinberg_exact_log_p(5000, 0, 5000), -6000.0);
}

// ---------------------------------------------------------------------------
// Rank-based inverse normal transform
// ---------------------------------------------------------------------------

TEST(TraitTransform, RankInverseNormalMatchesR) {
  // R 4.2.2: qnorm((rank(x) - 3/8) / (length(x) + 1/4)), ties averaged by rank().
  Eigen::VectorXd x(14);
  x << 3.2, 1.5, 3.2, -0.7, 8.1, 1.5, 1.5, 0, 12.4, -2.2, 3.2, 5.5, 1e-300, -1e300;
  const double want[] = {0.45498114030642828,  -0.088065569724094558, 0.45498114030642828,
                         -0.89943490766723377, 1.2053449195375292,    -0.088065569724094558,
                         -0.088065569724094558, -0.66075112714025519, 1.7075530935596597,
                         -1.2053449195375292,  0.45498114030642828,   0.89943490766723377,
                         -0.45498114030642828, -1.7075530935596599};
  const Eigen::VectorXd got = rank_inverse_normal(x);
  for (int idx = 0; idx < 14; ++idx) EXPECT_LE(relative_error(got[idx], want[idx]), 1e-14) << idx;
}

TEST(TraitTransform, MissingValuesStayMissingAndConstantsMapToZero) {
  Eigen::VectorXd x(5);
  x << 2.0, std::nan(""), -1.0, kInfinity, 7.0;
  const Eigen::VectorXd got = rank_inverse_normal(x);
  EXPECT_TRUE(std::isnan(got[1]));
  EXPECT_TRUE(std::isnan(got[3]));
  // Formula with n = 3 finite values: rank 2 -> Phi^-1((2 - 3/8) / 3.25) = Phi^-1(1/2) = 0.
  EXPECT_EQ(got[0], 0.0);
  EXPECT_DOUBLE_EQ(got[2], -got[4]);
  const Eigen::VectorXd constant = rank_inverse_normal(Eigen::VectorXd::Constant(6, 4.2));
  for (int idx = 0; idx < 6; ++idx) EXPECT_EQ(constant[idx], 0.0);
  EXPECT_EQ(rank_inverse_normal(Eigen::VectorXd()).size(), 0);
}

}  // namespace
}  // namespace tamis
