// The logistic mixed model of related samples
// (src/relatedness/logistic_mixed_model.cpp): the PQL null fit, the Laplace
// fits and their likelihood ratios, and the score statistics from the
// whitened working model, checked against R (MASS::glmmPQL and nlme, lme4's
// glmer, a dense oracle in base R) and by properties.
#include <gtest/gtest.h>

#include <algorithm>
#include <array>
#include <cmath>
#include <iostream>
#include <map>
#include <string>
#include <vector>

#include "support/r_reference.hpp"
#include "support/related_cohort.hpp"
#include "support/test_support.hpp"
#include "tamis/confirm.hpp"
#include "tamis/logistic_mixed_model.hpp"
#include "tamis/null_model.hpp"

namespace {

using tamis::LogisticMixedModel;
using tamis::testing::Cohort;
using tamis::testing::Random;
using ReferenceValues = std::map<std::string, std::string>;

// ---------------------------------------------------------------------------
// Cohorts. Each sample belongs to a group (its family, or itself); founders
// have no parents in the data, children draw one allele of each parent.

struct Member {
  int group = 0;
  int mother = -1;  // sample index, -1 for a founder
  int father = -1;
};

// Families of 2 to 6: two founders and their children; then `unrelated`
// samples alone.
std::vector<Member> nuclear_families(Random& random, int family_count, int unrelated) {
  std::vector<Member> members;
  int group = 0;
  for (int family = 0; family < family_count; ++family, ++group) {
    const int size = 2 + random.below(5);
    const int mother = static_cast<int>(members.size());
    members.push_back({group});
    members.push_back({group});
    for (int child = 2; child < size; ++child) members.push_back({group, mother, mother + 1});
  }
  for (int single = 0; single < unrelated; ++single, ++group) members.push_back({group});
  return members;
}

// Pedigrees with half-siblings: two founders and 1 to 3 children; in every
// other pedigree the father has 1 or 2 more children with a second partner.
// Then `unrelated` samples alone.
std::vector<Member> pedigrees_with_half_sibs(Random& random, int family_count, int unrelated) {
  std::vector<Member> members;
  int group = 0;
  for (int family = 0; family < family_count; ++family, ++group) {
    const int mother = static_cast<int>(members.size()), father = mother + 1;
    members.push_back({group});
    members.push_back({group});
    const int children = 1 + random.below(3);
    for (int child = 0; child < children; ++child) members.push_back({group, mother, father});
    if (family % 2 == 1) {
      const int partner = static_cast<int>(members.size());
      members.push_back({group});
      const int half_sibs = 1 + random.below(2);
      for (int child = 0; child < half_sibs; ++child) members.push_back({group, partner, father});
    }
  }
  for (int single = 0; single < unrelated; ++single, ++group) members.push_back({group});
  return members;
}

// A with 1 for every pair within a group: R's (1 | family).
tamis::SparseRelatedness family_intercept_matrix(const std::vector<Member>& members) {
  tamis::SparseRelatedness relatedness;
  relatedness.sample_count = members.size();
  relatedness.diagonal.assign(members.size(), 1.0);
  for (std::size_t first = 0; first < members.size(); ++first)
    for (std::size_t second = first + 1; second < members.size() && members[second].group == members[first].group;
         ++second)
      relatedness.pairs.push_back({static_cast<std::uint32_t>(first), static_cast<std::uint32_t>(second), 1.0});
  return relatedness;
}

// The pedigree's additive relationship by the tabular method: a child's
// entry with an earlier sample is the mean of its parents' entries (0.5 for
// parent and child and for full siblings, 0.25 for half-siblings, 0 for the
// unrelated partners), diagonal 1 (no inbreeding).
tamis::SparseRelatedness pedigree_matrix(const std::vector<Member>& members) {
  const auto n = static_cast<Eigen::Index>(members.size());
  Eigen::MatrixXd a = Eigen::MatrixXd::Identity(n, n);
  for (Eigen::Index sample = 0; sample < n; ++sample) {
    const Member& member = members[static_cast<std::size_t>(sample)];
    if (member.mother < 0) continue;
    for (Eigen::Index earlier = 0; earlier < sample; ++earlier) {
      a(sample, earlier) = a(earlier, sample) = 0.5 * (a(member.mother, earlier) + a(member.father, earlier));
    }
  }
  tamis::SparseRelatedness relatedness;
  relatedness.sample_count = members.size();
  relatedness.diagonal.assign(members.size(), 1.0);
  for (Eigen::Index first = 0; first < n; ++first)
    for (Eigen::Index second = first + 1; second < n; ++second)
      if (a(first, second) != 0.0)
        relatedness.pairs.push_back(
            {static_cast<std::uint32_t>(first), static_cast<std::uint32_t>(second), a(first, second)});
  return relatedness;
}

struct Simulation {
  double family_variance = 0.8;  // tau of b ~ N(0, tau A)
  double effect = 0.5;           // log odds ratio of g1
};

// Three variants passed down the pedigree (allele frequencies 0.3, 0.05 and
// 0.4); c1 ~ N(0, 1), c2 ~ Bernoulli(0.5); b ~ N(0, tau A) through the
// Cholesky factor of each group's block of A (A = 1 1' within a family is
// singular: one shared draw); and
// y ~ Bernoulli(logistic(-1.5 + 0.4 c1 - 0.3 c2 + effect g1 + b)).
Cohort binary_cohort(std::uint64_t seed, const std::vector<Member>& members,
                     const tamis::SparseRelatedness& relatedness, const Simulation& simulation) {
  Random random(seed);
  Cohort cohort;
  const auto n = static_cast<Eigen::Index>(members.size());
  cohort.relatedness = relatedness;
  const double frequencies[] = {0.3, 0.05, 0.4};
  cohort.variants.resize(n, 3);
  std::vector<std::array<int, 2>> alleles(members.size());
  for (Eigen::Index variant = 0; variant < 3; ++variant) {
    for (Eigen::Index sample = 0; sample < n; ++sample) {
      const Member& member = members[static_cast<std::size_t>(sample)];
      auto& own = alleles[static_cast<std::size_t>(sample)];
      if (member.mother < 0) {
        own = {random.allele(frequencies[variant]), random.allele(frequencies[variant])};
      } else {
        own = {alleles[static_cast<std::size_t>(member.mother)][random.below(2)],
               alleles[static_cast<std::size_t>(member.father)][random.below(2)]};
      }
      cohort.variants(sample, variant) = own[0] + own[1];
    }
  }
  cohort.design.resize(n, 3);
  for (Eigen::Index sample = 0; sample < n; ++sample) {
    cohort.family.push_back(members[static_cast<std::size_t>(sample)].group);
    cohort.design(sample, 0) = 1.0;
    cohort.design(sample, 1) = random.normal();
    cohort.design(sample, 2) = random.allele(0.5);
  }
  const Eigen::MatrixXd a = tamis::testing::dense_relatedness(relatedness);
  Eigen::VectorXd b = Eigen::VectorXd::Zero(n);
  for (Eigen::Index start = 0; start < n;) {
    Eigen::Index end = start;
    while (end < n && cohort.family[end] == cohort.family[start]) ++end;
    const Eigen::MatrixXd block = a.block(start, start, end - start, end - start);
    if ((block.array() == 1.0).all()) {
      b.segment(start, end - start).setConstant(std::sqrt(simulation.family_variance) * random.normal());
    } else {
      Eigen::VectorXd draws(end - start);
      for (double& draw : draws) draw = random.normal();
      const Eigen::MatrixXd factor = Eigen::LLT<Eigen::MatrixXd>(block).matrixL();
      b.segment(start, end - start) = std::sqrt(simulation.family_variance) * factor * draws;
    }
    start = end;
  }
  cohort.y.resize(n);
  for (Eigen::Index sample = 0; sample < n; ++sample) {
    const double eta = -1.5 + 0.4 * cohort.design(sample, 1) - 0.3 * cohort.design(sample, 2) +
                       simulation.effect * cohort.variants(sample, 0) + b[sample];
    cohort.y[sample] = random.uniform() < 1.0 / (1.0 + std::exp(-eta)) ? 1.0 : 0.0;
  }
  return cohort;
}

Cohort family_cohort(std::uint64_t seed, int family_count, int unrelated, const Simulation& simulation = {}) {
  Random random(seed);
  const std::vector<Member> members = nuclear_families(random, family_count, unrelated);
  return binary_cohort(seed + 1, members, family_intercept_matrix(members), simulation);
}

Cohort pedigree_cohort(std::uint64_t seed, int family_count, int unrelated) {
  Random random(seed);
  const std::vector<Member> members = pedigrees_with_half_sibs(random, family_count, unrelated);
  return binary_cohort(seed + 1, members, pedigree_matrix(members), {});
}

LogisticMixedModel fit_model(const Cohort& cohort) {
  return LogisticMixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
}

// ---------------------------------------------------------------------------
// The score statistics as the scan computes them: from the whitened working
// model, by ordinary least squares with the dispersion fixed at 1.

struct Score {
  double u = 0.0;  // g' Sigma^-1 (yw - X beta-hat)
  double v = 0.0;  // g'Pg
};

Score whitened_score(const LogisticMixedModel& model, const Eigen::VectorXd& genotype) {
  const Eigen::MatrixXd lx = model.whiten(model.design());
  const Eigen::VectorXd ly = model.whiten(model.working_response());
  const Eigen::VectorXd lg = model.whiten(genotype);
  const auto least_squares = lx.colPivHouseholderQr();
  const Eigen::VectorXd residual = ly - lx * least_squares.solve(ly);
  const Eigen::VectorXd adjusted = lg - lx * least_squares.solve(lg);
  return {lg.dot(residual), adjusted.squaredNorm()};
}

// |actual - expected| <= tolerance max(|expected|, floor): relative, or
// absolute (tolerance x floor) for a value near 0. Recorded as a relative
// deviation for the report.
void expect_close(double actual, double expected, double tolerance, double floor, const std::string& what) {
  EXPECT_NEAR(actual, expected, tolerance * std::max(std::fabs(expected), floor)) << what;
  const double deviation = std::fabs(actual - expected) / std::max(std::fabs(expected), floor);
  auto& largest = tamis::testing::largest_deviation;
  if (deviation > largest.largest) largest = {deviation, what};
}

std::string quoted(const std::string& path) { return "'" + path + "'"; }

// ---------------------------------------------------------------------------
// 1. The PQL null fit, random family intercept.

// 200 families of 2-6 and 200 unrelated samples (about 1,000), tau = 0.8.
Cohort reference_family_cohort() { return family_cohort(20260315, 200, 200); }

TEST(LogisticMixedModelReference, PqlNullFitMatchesGlmmPqlWithMlAndItsIterationWithRemlVariance) {
  if (!tamis::testing::have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = reference_family_cohort();
  const std::string dir = tamis::testing::make_temp_dir("logistic_mixed_pql");
  const ReferenceValues r =
      tamis::testing::run_reference("logistic_mixed_model_pql.R", quoted(tamis::testing::write_data(cohort, dir)));
  std::cout << "reference: R " << r.at("r_version") << ", MASS " << r.at("mass_version") << ", nlme "
            << r.at("nlme_version") << "; " << cohort.size() << " samples, " << cohort.y.sum() << " cases\n";

  // The reference loop itself, before it serves as the reference:
  // Source: R MASS 7.3.58.2 glmmPQL(y ~ c1 + c2, random = ~1 | family, family =
  // binomial, niter = 200) with nlme 3.1.162 lmeControl(sigma = 1), R 4.2.2.
  // sigma = 1 fixes the working model's dispersion at 1, as Bernoulli data
  // have (our model); glmmPQL's default would also estimate a residual scale.
  // glmmPQL stops when sum((eta - eta_old)^2) < 1e-6 sum(eta^2), which leaves
  // its fit a few 1e-4 from the fixed point: to 1e-3.
  for (const std::string suffix : {"tau", "beta_0", "beta_1", "beta_2"})
    tamis::testing::expect_reference(tamis::testing::value_of(r, "formula_ml_" + suffix), r, "glmmpql_" + suffix,
                                     1e-3);
  // Source: R nlme 3.1.162 lme(..., weights = varFixed(~invwt), method = "ML",
  // lmeControl(sigma = 1)) in glmmPQL's iteration run to 1e-8 (nlme places tau
  // to about 1e-8): the working models solved from their formulas agree.
  for (const std::string suffix : {"tau", "beta_0", "beta_1", "beta_2"})
    tamis::testing::expect_reference(tamis::testing::value_of(r, "formula_ml_" + suffix), r, "nlme_ml_" + suffix,
                                     1e-6);
  tamis::testing::report_largest_deviation("glmmPQL and nlme (the ML iteration)");

  const LogisticMixedModel model = fit_model(cohort);
  ASSERT_TRUE(model.pql().converged);
  EXPECT_FALSE(model.pql().tau_at_zero);
  EXPECT_GT(model.pql().iterations, 1);
  // Source: the same PQL iteration (glmmPQL's working response and weights,
  // checked above against MASS 7.3.58.2 and nlme 3.1.162) with tau by REML,
  // as the model estimates it, from the REML score in closed form, R 4.2.2
  // (tests/reference/logistic_mixed_model_pql.R), iterated to 1e-12: to 1e-6.
  // (nlme 3.1.162's own REML with a fixed sigma does not maximise the REML
  // likelihood, measured: see the script; glmmPQL uses ML.)
  tamis::testing::expect_reference(model.pql().tau, r, "formula_reml_tau", 1e-6);
  for (int column = 0; column < 3; ++column)
    tamis::testing::expect_reference(model.coefficients()[column], r,
                                     "formula_reml_beta_" + std::to_string(column), 1e-6);
  tamis::testing::report_largest_deviation("PQL with REML variance in R");

  // The same fit with tau by ML on each working model, as glmmPQL estimates it.
  tamis::LogisticMixedOptions ml_options;
  ml_options.variance = tamis::WorkingVariance::ml;
  const LogisticMixedModel ml_model = LogisticMixedModel::fit(cohort.y, cohort.design, cohort.relatedness, ml_options);
  ASSERT_TRUE(ml_model.pql().converged);
  EXPECT_FALSE(ml_model.pql().tau_at_zero);
  // Source: R 4.2.2, MASS 7.3.58.2 glmmPQL(y ~ c1 + c2, random = ~1 | family,
  // family = binomial, niter = 200, control = nlme::lmeControl(sigma = 1)),
  // nlme 3.1.162, as released: to 1e-3 (its stopping rule leaves it a few 1e-4
  // from the fixed point, see above).
  tamis::testing::expect_reference(ml_model.pql().tau, r, "glmmpql_tau", 1e-3);
  for (int column = 0; column < 3; ++column)
    tamis::testing::expect_reference(ml_model.coefficients()[column], r, "glmmpql_beta_" + std::to_string(column),
                                     1e-3);
  tamis::testing::report_largest_deviation("glmmPQL (PQL with ML variance)");
  // Source: glmmPQL's iteration on R nlme 3.1.162 lme(..., method = "ML",
  // lmeControl(sigma = 1)) run to 1e-8 (tests/reference/logistic_mixed_model_pql.R): to 1e-6.
  tamis::testing::expect_reference(ml_model.pql().tau, r, "nlme_ml_tau", 1e-6);
  for (int column = 0; column < 3; ++column)
    tamis::testing::expect_reference(ml_model.coefficients()[column], r, "nlme_ml_beta_" + std::to_string(column),
                                     1e-6);
  tamis::testing::report_largest_deviation("nlme (PQL with ML variance, tight)");
}

// ---------------------------------------------------------------------------
// 2. Laplace fits and likelihood ratios, random family intercept.

TEST(LogisticMixedModelReference, LaplaceFitsAndLikelihoodRatiosMatchGlmer) {
  if (!tamis::testing::have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = reference_family_cohort();
  const std::string dir = tamis::testing::make_temp_dir("logistic_mixed_glmer");
  const ReferenceValues r = tamis::testing::run_reference("logistic_mixed_model_glmer.R",
                                                          quoted(tamis::testing::write_data(cohort, dir)));
  std::cout << "reference: lme4 " << r.at("lme4_version") << ", R " << r.at("r_version") << "\n";
  const LogisticMixedModel model = fit_model(cohort);

  // Source: R lme4 1.1.31 glmer(y ~ c1 + c2 + (1 | family), family = binomial,
  // nAGQ = 1) with bobyqa to rhoend 1e-12, R 4.2.2: logLik, the family
  // variance of VarCorr and fixef, to 1e-3 (coefficients relative, absolute
  // below 0.1).
  const tamis::LaplaceFit& null_fit = model.null_laplace();
  EXPECT_TRUE(null_fit.converged);
  tamis::testing::expect_reference(null_fit.log_likelihood, r, "null_loglik", 1e-3);
  tamis::testing::expect_reference(null_fit.tau, r, "null_tau", 1e-3);
  ASSERT_EQ(null_fit.coefficients.size(), 3);
  for (int column = 0; column < 3; ++column) {
    const std::string key = "null_beta_" + std::to_string(column);
    expect_close(null_fit.coefficients[column], tamis::testing::value_of(r, key), 1e-3, 0.1, key);
  }

  for (int variant = 0; variant < 3; ++variant) {
    const std::string key = "g" + std::to_string(variant + 1);
    const Eigen::VectorXd genotype = cohort.variants.col(variant);
    const tamis::LaplaceFit full = model.laplace_fit_with(genotype);
    const tamis::ConfirmResult confirmed = model.confirm(genotype);
    EXPECT_TRUE(full.converged) << key;
    EXPECT_TRUE(confirmed.converged) << key;
    // Source: R lme4 1.1.31 glmer(y ~ c1 + c2 + gJ + (1 | family), nAGQ = 1),
    // R 4.2.2: logLik, VarCorr, fixef to 1e-3.
    tamis::testing::expect_reference(full.log_likelihood, r, key + "_loglik", 1e-3);
    tamis::testing::expect_reference(full.tau, r, key + "_tau", 1e-3);
    ASSERT_EQ(full.coefficients.size(), 4);
    for (int column = 0; column < 4; ++column) {
      const std::string beta_key = key + "_beta_" + std::to_string(column);
      expect_close(full.coefficients[column], tamis::testing::value_of(r, beta_key), 1e-3, 0.1, beta_key);
    }
    // Source: R lme4 1.1.31 anova(m0, m1) Chisq, R 4.2.2: to 1e-3 relative
    // (absolute 1e-4 for a statistic below 0.1).
    expect_close(confirmed.lrt_chisq, tamis::testing::value_of(r, key + "_lr"), 1e-3, 0.1, key + "_lr");
    EXPECT_GE(confirmed.lrt_chisq, 0.0) << key;
    EXPECT_DOUBLE_EQ(confirmed.beta, full.coefficients[3]) << key;
    EXPECT_NEAR(confirmed.wald_chisq, (confirmed.beta / confirmed.se) * (confirmed.beta / confirmed.se),
                1e-12 * confirmed.wald_chisq)
        << key;
    // Source: R lme4 1.1.31, (fixef / sqrt(diag(vcov(m1, use.hessian =
    // FALSE))))^2: the SE from lme4's RX factor is the working model's GLS
    // SE at the fit, (X' Sigma^-1 X)^-1 with W at the conditional mode, the
    // model's definition: to 1e-3.
    const double z_working = tamis::testing::value_of(r, key + "_z_rx");
    expect_close(confirmed.wald_chisq, z_working * z_working, 1e-3, 0.1, key + "_z_rx squared");
  }
  tamis::testing::report_largest_deviation("lme4 " + r.at("lme4_version"));

  // Source: R lme4 1.1.31 summary(m1) z value, whose SE (lme4's default)
  // comes from the finite-difference Hessian of the Laplace deviance over
  // beta and the variance: it also carries the variance's uncertainty and
  // the change of W with beta, which the working model's SE leaves out, so
  // the two Wald statistics differ by a few per cent (about 5% measured on
  // g1 here): to 10%.
  for (int variant = 0; variant < 3; ++variant) {
    const std::string key = "g" + std::to_string(variant + 1);
    const double z = tamis::testing::value_of(r, key + "_z");
    expect_close(model.confirm(cohort.variants.col(variant)).wald_chisq, z * z, 0.1, 0.1, key + "_z squared");
  }
  tamis::testing::report_largest_deviation("lme4 " + r.at("lme4_version") + " (Hessian-based Wald)");
  EXPECT_GT(model.confirm(cohort.variants.col(0)).lrt_chisq, 5.0) << "the simulated effect of g1 is found";
}

// ---------------------------------------------------------------------------
// 3. Score statistics and the fixed point, against the dense oracle.

// Source: the dense oracle in base R 4.2.2 (chol2inv, solve, uniroot on the
// full n x n Sigma), tests/reference/logistic_mixed_model_dense_oracle.R,
// at the model's tau: beta and b iterated to 1e-12, then U = g'(y - mu) and
// V = g'Pg. To 1e-6.
void check_scores_against_dense_oracle(const LogisticMixedModel& model, const Cohort& cohort,
                                       const ReferenceValues& r) {
  for (int column = 0; column < 3; ++column)
    tamis::testing::expect_reference(model.coefficients()[column], r, "beta_" + std::to_string(column), 1e-6);
  // b and mu, every sample: absolute 1e-6 (b is near 0 for many samples).
  double largest_b = 0.0, largest_mu = 0.0;
  for (int sample = 0; sample < cohort.size(); ++sample) {
    const std::string index = std::to_string(sample + 1);
    largest_b = std::max(largest_b,
                         std::fabs(model.random_effects()[sample] - tamis::testing::value_of(r, "b_" + index)));
    largest_mu = std::max(largest_mu, std::fabs(model.fitted()[sample] - tamis::testing::value_of(r, "mu_" + index)));
  }
  EXPECT_LT(largest_b, 1e-6);
  EXPECT_LT(largest_mu, 1e-6);
  std::cout << "largest |b - oracle| " << largest_b << ", |mu - oracle| " << largest_mu << "\n";

  // The PQL fixed point: tau is the REML estimate of its own last working
  // model (the root of the dense REML score), and the REML log-likelihood is
  // that model's at tau (formula in the script).
  tamis::testing::expect_reference(model.pql().tau, r, "reml_tau", 1e-6);
  tamis::testing::expect_reference(model.pql().reml_log_likelihood, r, "reml_loglik", 1e-8);

  const Eigen::VectorXd residual = cohort.y - model.fitted();
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    const std::string key = "g" + std::to_string(variant + 1);
    const Eigen::VectorXd genotype = cohort.variants.col(variant);
    const Score score = whitened_score(model, genotype);
    // U and V to 1e-6 relative (U relative to sqrt(V), its standard error,
    // when U itself is near 0).
    expect_close(score.u, tamis::testing::value_of(r, key + "_u"), 1e-6, std::sqrt(score.v), key + "_u");
    tamis::testing::expect_reference(score.v, r, key + "_v", 1e-6);
    // At the fixed point Sigma^-1 (yw - X beta) = y - mu (formula).
    EXPECT_NEAR(score.u, genotype.dot(residual), 1e-6 * std::max(std::fabs(score.u), std::sqrt(score.v))) << key;
  }
}

// The Laplace fits: the null model's and each variant's, as points for the
// oracle to evaluate.
struct LaplacePoint {
  std::string name, variant;
  tamis::LaplaceFit fit;
};

std::vector<LaplacePoint> laplace_points(const LogisticMixedModel& model, const Cohort& cohort) {
  std::vector<LaplacePoint> points{{"null", "none", model.null_laplace()}};
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    const std::string key = "g" + std::to_string(variant + 1);
    points.push_back({key, key, model.laplace_fit_with(cohort.variants.col(variant))});
  }
  return points;
}

std::string write_laplace_points(const std::vector<LaplacePoint>& points, const std::string& dir) {
  std::string text = "name\tvariant\ttau\tbeta\n";
  for (const LaplacePoint& point : points) {
    text += point.name + "\t" + point.variant + "\t" + tamis::testing::number_text(point.fit.tau) + "\t";
    for (Eigen::Index column = 0; column < point.fit.coefficients.size(); ++column)
      text += (column > 0 ? "," : "") + tamis::testing::number_text(point.fit.coefficients[column]);
    text += "\n";
  }
  const std::string path = dir + "/laplace_points.tsv";
  tamis::testing::write_text_file(path, text);
  return path;
}

// Source: the dense oracle in base R 4.2.2 (solve, determinant on n x n;
// the conditional mode by Newton's method to 1e-12): the Laplace
// log-likelihood at each fit's beta and tau to 1e-8, and each fit a maximum:
// the derivatives (central differences) in beta and in log tau below 1e-3
// in size, or, where tau is 0 (a maximum on the boundary), the one-sided
// derivative in tau at most 1e-3. (In log tau, so that a fit stopped on a
// slope at a large tau, where the likelihood changes little per unit of
// tau, is not taken for a maximum.)
void check_laplace_against_dense_oracle(const std::vector<LaplacePoint>& points, const ReferenceValues& r) {
  for (const LaplacePoint& point : points) {
    SCOPED_TRACE(point.name);
    std::cout << point.name << ": tau " << point.fit.tau << ", log-likelihood " << point.fit.log_likelihood << "\n";
    EXPECT_TRUE(point.fit.converged) << "tau " << point.fit.tau;
    tamis::testing::expect_reference(point.fit.log_likelihood, r, point.name + "_loglik", 1e-8);
    const double tau_slope = tamis::testing::value_of(r, point.name + "_gradient_tau");
    if (point.fit.tau > 0.0) {
      EXPECT_LT(std::fabs(point.fit.tau * tau_slope), 1e-3);
    } else {
      EXPECT_LT(tau_slope, 1e-3);
    }
    for (Eigen::Index column = 0; column < point.fit.coefficients.size(); ++column)
      EXPECT_LT(std::fabs(tamis::testing::value_of(r, point.name + "_gradient_beta_" + std::to_string(column))), 1e-3)
          << "beta_" << column;
  }
}

// Runs the oracle at the model's tau (and at its Laplace fits when asked).
void check_against_dense_oracle(const Cohort& cohort, const std::string& name, bool with_laplace) {
  const LogisticMixedModel model = fit_model(cohort);
  ASSERT_TRUE(model.pql().converged);
  const std::string dir = tamis::testing::make_temp_dir(name);
  std::string arguments = quoted(tamis::testing::write_data(cohort, dir)) + " " +
                          quoted(tamis::testing::write_pairs(cohort.relatedness, dir)) + " " +
                          tamis::testing::number_text(model.pql().tau);
  std::vector<LaplacePoint> points;
  if (with_laplace) {
    points = laplace_points(model, cohort);
    arguments += " " + quoted(write_laplace_points(points, dir));
  }
  const ReferenceValues r = tamis::testing::run_reference("logistic_mixed_model_dense_oracle.R", arguments);
  std::cout << cohort.size() << " samples, " << cohort.y.sum() << " cases, PQL tau " << model.pql().tau << " after "
            << model.pql().iterations << " iterations\n";
  check_scores_against_dense_oracle(model, cohort, r);
  check_laplace_against_dense_oracle(points, r);
  tamis::testing::report_largest_deviation("the dense oracle in R, " + name);
}

TEST(LogisticMixedModelReference, FamilyInterceptScoresMatchDenseOracle) {
  if (!tamis::testing::have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = family_cohort(20260316, 80, 80);
  ASSERT_GT(fit_model(cohort).pql().tau, 0.1) << "the test wants a family effect";
  check_against_dense_oracle(cohort, "logistic_mixed_oracle_families", false);
}

// A pedigree matrix with parent-child and sibling pairs (0.5) and
// half-siblings (0.25) is no family intercept, so the oracle also checks the
// Laplace fits there: on a cohort with a clear family effect, and on one
// whose PQL variance is 0.
bool has_half_sibs(const Cohort& cohort) {
  for (const auto& pair : cohort.relatedness.pairs)
    if (pair.value == 0.25) return true;
  return false;
}

TEST(LogisticMixedModelReference, PedigreeRelatednessMatchesDenseOracle) {
  if (!tamis::testing::have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = pedigree_cohort(20260317, 60, 60);
  ASSERT_TRUE(has_half_sibs(cohort));
  ASSERT_GT(fit_model(cohort).pql().tau, 0.1) << "the test wants a family effect";
  check_against_dense_oracle(cohort, "logistic_mixed_oracle_pedigrees", true);
}

TEST(LogisticMixedModelReference, PedigreeWithoutPqlVarianceMatchesDenseOracle) {
  if (!tamis::testing::have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = pedigree_cohort(45, 40, 40);
  ASSERT_TRUE(has_half_sibs(cohort));
  ASSERT_TRUE(fit_model(cohort).pql().tau_at_zero);
  check_against_dense_oracle(cohort, "logistic_mixed_oracle_pedigrees_tau_zero", true);
}

// ---------------------------------------------------------------------------
// 4. Properties.

// Whitening: L'L = Sigma^-1 = (W^-1 + tau A)^-1 at the fit (formula), and a
// block whitened in place holds each variant's own whitened values.
TEST(LogisticMixedModel, WhiteningInvertsTheWorkingCovariance) {
  const Cohort cohort = pedigree_cohort(41, 25, 20);
  const LogisticMixedModel model = fit_model(cohort);
  const Eigen::Index n = cohort.size();
  const Eigen::MatrixXd l = model.whiten(Eigen::MatrixXd(Eigen::MatrixXd::Identity(n, n)));
  const Eigen::MatrixXd sigma = Eigen::MatrixXd(model.working_weights().cwiseInverse().asDiagonal()) +
                                model.pql().tau * tamis::testing::dense_relatedness(cohort.relatedness);
  EXPECT_LT((l.transpose() * l * sigma - Eigen::MatrixXd::Identity(n, n)).cwiseAbs().maxCoeff(), 1e-9);

  const std::size_t width = static_cast<std::size_t>(cohort.variants.cols()), rows = static_cast<std::size_t>(n) + 1;
  std::vector<std::size_t> row_of_sample(static_cast<std::size_t>(n));
  for (std::size_t sample = 0; sample < row_of_sample.size(); ++sample) row_of_sample[sample] = rows - 1 - sample;
  std::vector<double> block(rows * width, -7.0);
  for (std::size_t sample = 0; sample < row_of_sample.size(); ++sample)
    for (std::size_t col = 0; col < width; ++col)
      block[row_of_sample[sample] * width + col] =
          cohort.variants(static_cast<Eigen::Index>(sample), static_cast<Eigen::Index>(col));
  model.whiten_block(block.data(), width, row_of_sample);
  for (std::size_t col = 0; col < width; ++col) {
    const Eigen::VectorXd expected = model.whiten(Eigen::VectorXd(cohort.variants.col(static_cast<Eigen::Index>(col))));
    for (std::size_t sample = 0; sample < row_of_sample.size(); ++sample)
      EXPECT_EQ(block[row_of_sample[sample] * width + col], expected[static_cast<Eigen::Index>(sample)]);
    EXPECT_EQ(block[col], -7.0) << "a row that is not the model's is left alone";
  }
}

// Pairs of one case and one control in every family: within a family the
// trait is negatively correlated, so the REML variance is 0 and the model is
// the plain logistic regression (src/model, IRLS).
TEST(LogisticMixedModel, DiscordantPairsPutTauAtZeroAndGiveThePlainLogisticModel) {
  Cohort cohort = family_cohort(42, 150, 0);
  for (std::size_t start = 0; start < cohort.family.size();) {
    std::size_t end = start;
    while (end < cohort.family.size() && cohort.family[end] == cohort.family[start]) ++end;
    for (std::size_t member = start; member < end; ++member) cohort.y[member] = (member - start) % 2 == 0 ? 1.0 : 0.0;
    start = end;
  }
  const LogisticMixedModel model = fit_model(cohort);
  const tamis::NullModel plain = tamis::fit_null_model("trait", tamis::TraitKind::binary, cohort.y, cohort.design,
                                                       tamis::testing::design_names());
  EXPECT_TRUE(model.pql().tau_at_zero);
  EXPECT_EQ(model.pql().tau, 0.0);
  EXPECT_LT((model.coefficients() - plain.coefficients).cwiseAbs().maxCoeff(), 1e-6);
  EXPECT_LT((model.fitted() - plain.fitted).cwiseAbs().maxCoeff(), 1e-6);
  EXPECT_LT(model.random_effects().cwiseAbs().maxCoeff(), 1e-12);
  // The Laplace likelihood at tau = 0 is the binomial likelihood.
  EXPECT_EQ(model.null_laplace().tau, 0.0);
  EXPECT_NEAR(model.null_laplace().log_likelihood, plain.log_likelihood, 1e-8 * std::fabs(plain.log_likelihood));
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    const Eigen::VectorXd genotype = cohort.variants.col(variant);
    const Score score = whitened_score(model, genotype);
    // The plain model's score test: U = g'(y - mu), V = g'Wg - g'WX(X'WX)^-1X'Wg.
    const Eigen::VectorXd root_w = plain.weights.cwiseSqrt();
    const Eigen::VectorXd adjusted =
        root_w.cwiseProduct(genotype) - plain.basis * (plain.basis.transpose() * root_w.cwiseProduct(genotype));
    EXPECT_NEAR(score.u, genotype.dot(plain.residuals), 1e-6 * std::sqrt(score.v));
    EXPECT_NEAR(score.v, adjusted.squaredNorm(), 1e-6 * score.v);
    const tamis::LaplaceFit full = model.laplace_fit_with(genotype);
    if (full.tau == 0.0) {
      EXPECT_NEAR(model.confirm(genotype).lrt_chisq, tamis::confirm_variant(plain, genotype).lrt_chisq, 1e-6);
    }
    EXPECT_GE(model.confirm(genotype).lrt_chisq, 0.0);
  }
}

// No family effect at all (tau = 0 in the simulation). The REML estimate
// spreads above 0 by chance: over seeds 100-119 of this set-up (measured), 7
// fits gave tau exactly 0 and the others 0.01 to 0.49. Seed 102 gives 0, and
// there the fit is the plain logistic regression (src/model, IRLS).
TEST(LogisticMixedModel, TraitWithoutFamilyEffectGivesThePlainLogisticModelAtTauZero) {
  Simulation independent;
  independent.family_variance = 0.0;
  const Cohort cohort = family_cohort(102, 200, 100, independent);
  const LogisticMixedModel model = fit_model(cohort);
  EXPECT_TRUE(model.pql().converged);
  ASSERT_TRUE(model.pql().tau_at_zero);
  EXPECT_EQ(model.pql().tau, 0.0);
  const tamis::NullModel plain = tamis::fit_null_model("trait", tamis::TraitKind::binary, cohort.y, cohort.design,
                                                       tamis::testing::design_names());
  EXPECT_LT((model.coefficients() - plain.coefficients).cwiseAbs().maxCoeff(), 1e-6);
  EXPECT_LT((model.fitted() - plain.fitted).cwiseAbs().maxCoeff(), 1e-6);
}

TEST(LogisticMixedModel, GenotypeInTheCovariateSpanIsNotEstimable) {
  const Cohort cohort = family_cohort(44, 60, 40);
  const LogisticMixedModel model = fit_model(cohort);
  const tamis::ConfirmResult result = model.confirm(2.0 * cohort.design.col(2) + 1.0 * cohort.design.col(0));
  tamis::testing::expect_not_estimable(result);
}

// Bounds every Laplace fit obeys when A is positive semi-definite: the
// log-likelihood is at most 0 (sum log p <= 0, the penalty b'(tau A)^-1 b
// and log|I + tau W^1/2 A W^1/2| are >= 0); the null fit is at least the
// plain logistic model's, which is its value at tau = 0; and a full fit, which
// nests the null, is at least the null's: 0 <= LR <= -2 l0 (formula).
TEST(LogisticMixedModel, LaplaceFitsStayWithinTheirBounds) {
  const Cohort cohort = pedigree_cohort(45, 40, 40);
  const LogisticMixedModel model = fit_model(cohort);
  const tamis::NullModel plain = tamis::fit_null_model("trait", tamis::TraitKind::binary, cohort.y, cohort.design,
                                                       tamis::testing::design_names());
  const double null_log_likelihood = model.null_laplace().log_likelihood;
  EXPECT_LE(null_log_likelihood, 0.0);
  EXPECT_GE(null_log_likelihood, plain.log_likelihood - 1e-9 * std::fabs(plain.log_likelihood));
  Random random(46);
  for (int draw = 0; draw < 10; ++draw) {
    Eigen::VectorXd genotype(cohort.size());
    const double frequency = 0.03 + 0.4 * random.uniform();
    for (double& dosage : genotype) dosage = random.allele(frequency) + random.allele(frequency);
    if (genotype.maxCoeff() == genotype.minCoeff()) continue;
    SCOPED_TRACE("draw " + std::to_string(draw) + ", allele frequency " + std::to_string(frequency));
    // LR = 2 (l1 - l0): the bounds on l1 are bounds on LR.
    const tamis::ConfirmResult result = model.confirm(genotype);
    EXPECT_GE(result.lrt_chisq, 0.0);
    EXPECT_LE(result.lrt_chisq, -2.0 * null_log_likelihood) << "a full fit's log-likelihood above 0";
  }
}

}  // namespace
