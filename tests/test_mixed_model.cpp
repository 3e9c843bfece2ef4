// The linear mixed model of related samples (src/relatedness/mixed_model.cpp):
// REML and ML fits of h2, whitening, the score test on whitened data and the
// confirmation refits, checked against R lme4 (random family intercept), a
// dense oracle in base R (general A), dense algebra in C++ and properties.
#include <gtest/gtest.h>

#include <Eigen/Eigenvalues>
#include <Eigen/SparseCholesky>
#include <algorithm>
#include <cmath>
#include <iomanip>
#include <map>
#include <numeric>
#include <random>
#include <sstream>

#include "relatedness/component_factor.hpp"
#include "support/r_reference.hpp"
#include "support/related_cohort.hpp"
#include "support/test_support.hpp"
#include "tamis/confirm.hpp"
#include "tamis/errors.hpp"
#include "tamis/mixed_model.hpp"
#include "tamis/null_model.hpp"
#include "tamis/score_kernel.hpp"

namespace {

using tamis::MixedModel;
using tamis::SparseRelatedness;
using tamis::testing::Cohort;
using tamis::testing::dense_relatedness;
using tamis::testing::design_names;
using tamis::testing::expect_reference;
using tamis::testing::expect_relative;
using tamis::testing::have_rscript;
using tamis::testing::Random;
using tamis::testing::report_largest_deviation;
using tamis::testing::run_reference;
using tamis::testing::value_of;
using tamis::testing::write_data;
using tamis::testing::write_pairs;

// ---------------------------------------------------------------------------
// Data sets (the draws, the cohort and the files for R: support/related_cohort.hpp).

// Covariates: c1 an age-like value, c2 a 0/1 indicator.
void add_covariates(Cohort& cohort, Random& random) {
  const int n = cohort.size();
  cohort.design.resize(n, 3);
  for (int sample = 0; sample < n; ++sample) {
    cohort.design(sample, 0) = 1.0;
    cohort.design(sample, 1) = 20.0 + 50.0 * random.uniform();
    cohort.design(sample, 2) = random.allele(0.5);
  }
}

// A random family intercept: families of 1 to 6 samples, A = 1 for every pair
// within a family. y = 1 + 0.02 c1 + 0.3 c2 + 0.35 g1 + u_family + e with
// var(u) = 0.6, var(e) = 1.
Cohort family_cohort(std::uint64_t seed, int family_count) {
  Random random(seed);
  Cohort cohort;
  for (int family = 0; family < family_count; ++family) {
    const int members = 1 + random.below(6);
    for (int member = 0; member < members; ++member) cohort.family.push_back(family);
  }
  const int n = static_cast<int>(cohort.family.size());
  cohort.y.resize(n);
  add_covariates(cohort, random);
  cohort.variants.resize(n, 3);
  std::vector<double> family_effect(static_cast<std::size_t>(family_count));
  for (double& effect : family_effect) effect = std::sqrt(0.6) * random.normal();
  for (int sample = 0; sample < n; ++sample) {
    cohort.variants(sample, 0) = random.allele(0.3) + random.allele(0.3);
    cohort.variants(sample, 1) = random.allele(0.1) + random.allele(0.1);
    cohort.variants(sample, 2) = random.allele(0.5) + random.allele(0.5);
    cohort.y[sample] = 1.0 + 0.02 * cohort.design(sample, 1) + 0.3 * cohort.design(sample, 2) +
                       0.35 * cohort.variants(sample, 0) + family_effect[cohort.family[sample]] + random.normal();
  }
  cohort.relatedness.sample_count = static_cast<std::size_t>(n);
  cohort.relatedness.diagonal.assign(static_cast<std::size_t>(n), 1.0);
  for (int first = 0; first < n; ++first) {
    for (int second = first + 1; second < n && cohort.family[second] == cohort.family[first]; ++second) {
      cohort.relatedness.pairs.push_back({static_cast<std::uint32_t>(first), static_cast<std::uint32_t>(second), 1.0});
    }
  }
  return cohort;
}

// Pedigrees with Mendelian transmission (nuclear families of 3-6 and
// three-generation pedigrees with cousins, plus unrelated samples), and A the
// genomic relationship matrix Z Z' / M of standardised markers within each
// pedigree (0 between pedigrees): positive semi-definite, with
// off-diagonals that vary around the pedigree coefficients. y has h2 = 0.6
// of the residual variance and a 0.5 effect of variant g1.
Cohort pedigree_cohort(std::uint64_t seed) {
  Random random(seed);
  constexpr int kMarkers = 300;
  std::vector<double> frequency(kMarkers);
  for (double& p : frequency) p = 0.1 + 0.4 * random.uniform();
  std::vector<std::vector<int>> haplotypes;  // 2 x kMarkers per sample: alleles of the two copies
  std::vector<int> pedigree;
  auto founder = [&](int group) {
    std::vector<int> alleles(2 * kMarkers);
    for (int marker = 0; marker < kMarkers; ++marker) {
      alleles[2 * marker] = random.allele(frequency[marker]);
      alleles[2 * marker + 1] = random.allele(frequency[marker]);
    }
    haplotypes.push_back(alleles);
    pedigree.push_back(group);
    return static_cast<int>(haplotypes.size()) - 1;
  };
  auto child = [&](int mother, int father, int group) {
    std::vector<int> alleles(2 * kMarkers);
    for (int marker = 0; marker < kMarkers; ++marker) {
      alleles[2 * marker] = haplotypes[mother][2 * marker + random.below(2)];
      alleles[2 * marker + 1] = haplotypes[father][2 * marker + random.below(2)];
    }
    haplotypes.push_back(alleles);
    pedigree.push_back(group);
    return static_cast<int>(haplotypes.size()) - 1;
  };
  int group = 0;
  for (int family = 0; family < 22; ++family, ++group) {
    const int mother = founder(group), father = founder(group);
    const int children = 1 + random.below(4);
    for (int kid = 0; kid < children; ++kid) child(mother, father, group);
  }
  for (int extended = 0; extended < 3; ++extended, ++group) {
    const int grandmother = founder(group), grandfather = founder(group);
    for (int branch = 0; branch < 3; ++branch) {
      const int parent = child(grandmother, grandfather, group), spouse = founder(group);
      const int children = 2 + random.below(2);
      for (int kid = 0; kid < children; ++kid) child(parent, spouse, group);
    }
  }
  for (int single = 0; single < 50; ++single, ++group) founder(group);

  Cohort cohort;
  const int n = static_cast<int>(haplotypes.size());
  cohort.family = pedigree;
  cohort.y.resize(n);
  Eigen::MatrixXd dosages(n, kMarkers);
  for (int sample = 0; sample < n; ++sample)
    for (int marker = 0; marker < kMarkers; ++marker)
      dosages(sample, marker) = haplotypes[sample][2 * marker] + haplotypes[sample][2 * marker + 1];
  Eigen::MatrixXd standardised = dosages;
  for (int marker = 0; marker < kMarkers; ++marker) {
    const double p = dosages.col(marker).mean() / 2.0;
    standardised.col(marker) = (dosages.col(marker).array() - 2.0 * p) / std::sqrt(2.0 * p * (1.0 - p));
  }
  const Eigen::MatrixXd grm = standardised * standardised.transpose() / kMarkers;
  cohort.relatedness.sample_count = static_cast<std::size_t>(n);
  for (int first = 0; first < n; ++first) {
    cohort.relatedness.diagonal.push_back(grm(first, first));
    for (int second = first + 1; second < n; ++second) {
      if (pedigree[second] != pedigree[first]) continue;
      cohort.relatedness.pairs.push_back({static_cast<std::uint32_t>(first), static_cast<std::uint32_t>(second),
                                          grm(first, second)});
    }
  }
  add_covariates(cohort, random);
  cohort.variants = dosages.leftCols(4);
  const Eigen::MatrixXd a = dense_relatedness(cohort.relatedness);
  const Eigen::MatrixXd factor = Eigen::LLT<Eigen::MatrixXd>(a).matrixL();
  Eigen::VectorXd polygenic(n), noise(n);
  for (int sample = 0; sample < n; ++sample) {
    polygenic[sample] = random.normal();
    noise[sample] = random.normal();
  }
  cohort.y = 0.5 * Eigen::VectorXd::Ones(n) + 0.01 * cohort.design.col(1) + 0.2 * cohort.design.col(2) +
             0.5 * cohort.variants.col(0) + std::sqrt(0.6) * factor * polygenic + std::sqrt(0.4) * noise;
  return cohort;
}

// The same cohort with pairs below `keep_above` left out, as a file written
// with a threshold holds it, and three of the last unrelated samples joined by
// pairs that contradict each other (two close to a third, not to each other:
// eigenvalue 1 - 0.75 sqrt 2 = -0.06), as sampling noise in an estimated
// matrix can make them.
Cohort thresholded_with_contradiction(Cohort cohort, double keep_above) {
  auto& pairs = cohort.relatedness.pairs;
  pairs.erase(std::remove_if(pairs.begin(), pairs.end(), [&](const auto& pair) { return pair.value < keep_above; }),
              pairs.end());
  const auto last = static_cast<std::uint32_t>(cohort.size() - 1);
  pairs.push_back({last - 2, last - 1, 0.75});
  pairs.push_back({last - 2, last, 0.75});
  for (std::uint32_t sample = last - 2; sample <= last; ++sample) cohort.relatedness.diagonal[sample] = 1.0;
  return cohort;
}

// Population structure and few markers: three villages whose allele
// frequencies drift apart (p_v = p + N(0, F p (1 - p)), F = 0.02, clamped),
// 150 markers, and the genomic relationship matrix with pairs below 0.05 left
// out, as `tamis relatedness` writes it by default. Many pairs pass by drift
// and noise alone, so the samples form one large component whose sparse
// Cholesky factor fills in, and the thresholding leaves A with negative
// eigenvalues (about -0.25). y has h2 = 0.5 of polygenic effects spread over
// the markers (covariance 0.5 GRM) and a 0.5 effect of g1.
Cohort structured_cohort(std::uint64_t seed, int sample_count) {
  Random random(seed);
  constexpr int kMarkers = 150, kVillages = 3;
  constexpr double kDrift = 0.02;
  Eigen::MatrixXd dosages(sample_count, kMarkers);
  for (int marker = 0; marker < kMarkers; ++marker) {
    const double ancestral = 0.1 + 0.8 * random.uniform();
    double village_frequency[kVillages];
    for (double& frequency : village_frequency) {
      const double drifted = ancestral + std::sqrt(kDrift * ancestral * (1.0 - ancestral)) * random.normal();
      frequency = std::clamp(drifted, 0.02, 0.98);
    }
    for (int sample = 0; sample < sample_count; ++sample) {
      const double frequency = village_frequency[sample % kVillages];
      dosages(sample, marker) = random.allele(frequency) + random.allele(frequency);
    }
  }
  Eigen::MatrixXd standardised = dosages;
  for (int marker = 0; marker < kMarkers; ++marker) {
    const double p = dosages.col(marker).mean() / 2.0;
    standardised.col(marker) = (dosages.col(marker).array() - 2.0 * p) / std::sqrt(2.0 * p * (1.0 - p));
  }
  const Eigen::MatrixXd grm = standardised * standardised.transpose() / kMarkers;
  Cohort cohort;
  cohort.y.resize(sample_count);
  cohort.family.assign(static_cast<std::size_t>(sample_count), 0);
  cohort.relatedness.sample_count = static_cast<std::size_t>(sample_count);
  for (int first = 0; first < sample_count; ++first) {
    cohort.relatedness.diagonal.push_back(grm(first, first));
    for (int second = first + 1; second < sample_count; ++second) {
      if (grm(first, second) < 0.05) continue;
      cohort.relatedness.pairs.push_back({static_cast<std::uint32_t>(first), static_cast<std::uint32_t>(second),
                                          grm(first, second)});
    }
  }
  add_covariates(cohort, random);
  cohort.variants = dosages.leftCols(5);
  Eigen::VectorXd marker_effects(kMarkers), noise(sample_count);
  for (double& effect : marker_effects) effect = std::sqrt(0.5 / kMarkers) * random.normal();
  for (double& value : noise) value = std::sqrt(0.5) * random.normal();
  cohort.y = 0.5 * Eigen::VectorXd::Ones(sample_count) + 0.01 * cohort.design.col(1) + 0.2 * cohort.design.col(2) +
             0.5 * cohort.variants.col(0) + standardised * marker_effects + noise;
  return cohort;
}

// The cohort with its samples in another order (model index s becomes order[s]).
Cohort permuted(const Cohort& cohort, const std::vector<int>& new_index) {
  Cohort out = cohort;
  for (int sample = 0; sample < cohort.size(); ++sample) {
    const int to = new_index[sample];
    out.y[to] = cohort.y[sample];
    out.design.row(to) = cohort.design.row(sample);
    out.variants.row(to) = cohort.variants.row(sample);
    out.relatedness.diagonal[to] = cohort.relatedness.diagonal[sample];
  }
  for (auto& pair : out.relatedness.pairs) {
    const auto first = static_cast<std::uint32_t>(new_index[pair.first]);
    const auto second = static_cast<std::uint32_t>(new_index[pair.second]);
    pair.first = std::min(first, second);
    pair.second = std::max(first, second);
  }
  return out;
}

// Options that send every component of more than `above` samples down one
// path of component_factor.hpp: the eigendecomposition, the tridiagonal
// reduction (whitened by the dense or by the sparse Cholesky factor), or the
// sparse Cholesky at each h2.
struct NamedOptions {
  std::string name;
  tamis::MixedModelOptions options;
};

std::vector<NamedOptions> every_factorisation(std::size_t above = 4) {
  std::vector<NamedOptions> paths(4);
  paths[0].name = "eigendecomposition";
  paths[0].options.eigen_component_limit = paths[0].options.dense_component_limit = 100000;
  for (int dense = 1; dense <= 2; ++dense) {
    paths[dense].options.eigen_component_limit = above;
    paths[dense].options.sparse_work_share = 0.0;
  }
  paths[1].name = "tridiagonal, dense whitening";
  paths[1].options.sparse_whitening_entries = 0.0;
  paths[2].name = "tridiagonal, sparse whitening";
  paths[2].options.sparse_whitening_entries = 2.0;
  paths[3].name = "sparse Cholesky";
  paths[3].options.dense_component_limit = above;
  return paths;
}

// ---------------------------------------------------------------------------
// The scan's path: whiten y, X and the variants, fit the plain null model on
// the whitened data and run the blocked score kernel.

std::vector<tamis::ScoreResult> whitened_scores(const MixedModel& model, const Cohort& cohort) {
  const tamis::NullModel whitened =
      tamis::fit_null_model("trait", tamis::TraitKind::quantitative, model.whiten(cohort.y),
                            model.whiten(cohort.design), design_names());
  const std::size_t width = static_cast<std::size_t>(cohort.variants.cols());
  Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> block = cohort.variants;
  std::vector<std::size_t> identity(static_cast<std::size_t>(cohort.size()));
  std::iota(identity.begin(), identity.end(), std::size_t{0});
  model.whiten_block(block.data(), width, identity);
  tamis::ScoreKernel kernel(whitened);
  tamis::ScoreScratch scratch;
  std::vector<tamis::ScoreResult> results(width);
  kernel.compute(block.data(), width, scratch, results.data());
  return results;
}

// ---------------------------------------------------------------------------
// R reference runs.

// have_rscript, run_reference, expect_reference and the rest: support/r_reference.hpp.

// ---------------------------------------------------------------------------

TEST(RelatedComponents, UnionFindGroupsThePairGraphAndLeavesSingletonsOut) {
  SparseRelatedness relatedness;
  relatedness.sample_count = 9;
  relatedness.diagonal.assign(9, 1.0);
  relatedness.pairs = {{5, 8, 0.5}, {1, 7, 0.25}, {2, 5, 0.5}, {0, 7, 0.125}, {3, 4, 0.5}};
  const auto components = tamis::related_components(relatedness);
  const std::vector<std::vector<std::uint32_t>> expected = {{0, 1, 7}, {2, 5, 8}, {3, 4}};
  EXPECT_EQ(components, expected);
}

// Source: R lme4 1.1.31 (Debian r-cran-lme4, R 4.2.2), lmer(y ~ c1 + c2 +
// (1 | family)), run by tests/reference/mixed_model_lme4.R on this data set.
TEST(MixedModelReference, RandomFamilyInterceptMatchesLme4) {
  if (!have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = family_cohort(20260301, 110);
  const std::string dir = tamis::testing::make_temp_dir("mixed_model_lme4");
  const auto lme4 = run_reference("mixed_model_lme4.R", "'" + write_data(cohort, dir) + "'");
  std::cout << "reference: lme4 " << lme4.at("lme4_version") << ", R " << lme4.at("r_version") << "\n";
  ASSERT_GT(cohort.size(), 300);

  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  // lme4 1.1.31 REML: variance components, fixed effects and their SEs to 1e-4 relative.
  expect_reference(model.reml().sigma2_g, lme4, "reml_sigma2_g", 1e-4);
  expect_reference(model.reml().sigma2_e, lme4, "reml_sigma2_e", 1e-4);
  for (int column = 0; column < 3; ++column) {
    expect_reference(model.coefficients()[column], lme4, "reml_beta_" + std::to_string(column), 1e-4);
    expect_reference(model.standard_errors()[column], lme4, "reml_se_" + std::to_string(column), 1e-4);
  }
  // lme4 1.1.31 logLik of the REML fit, -REMLcrit / 2: the same constants
  // ((n - p)(1 + log 2 pi), log|X'V^-1 X| of the raw design), so the values agree.
  expect_reference(model.reml().log_likelihood, lme4, "reml_loglik", 1e-8);
  // lme4 1.1.31, REML = FALSE: the ML null fit.
  expect_reference(model.null_ml().log_likelihood, lme4, "ml0_loglik", 1e-8);
  expect_reference(model.null_ml().sigma2_g, lme4, "ml0_sigma2_g", 1e-4);
  expect_reference(model.null_ml().sigma2_e, lme4, "ml0_sigma2_e", 1e-4);

  // Confirmation against lme4 1.1.31: anova(m0, m1) Chisq for LR and the t value of
  // summary(m1) for Wald, both ML fits, to 1e-4.
  for (int variant = 0; variant < 3; ++variant) {
    const std::string key = "g" + std::to_string(variant + 1);
    const tamis::ConfirmResult result = model.confirm(cohort.variants.col(variant));
    EXPECT_TRUE(result.converged);
    const double t = value_of(lme4, key + "_t");
    expect_reference(result.lrt_chisq, lme4, key + "_lr", 1e-4);
    expect_relative(result.wald_chisq, t * t, 1e-4, key + "_t squared");
    expect_reference(result.beta, lme4, key + "_beta", 1e-4);
    expect_reference(result.se, lme4, key + "_se", 1e-4);
  }
  report_largest_deviation("lme4 " + lme4.at("lme4_version"));
  // The simulated effect of g1 is found.
  EXPECT_GT(model.confirm(cohort.variants.col(0)).lrt_chisq, 5.0);
}

void check_model_against_dense_oracle(const MixedModel& model, const Cohort& cohort,
                                      const std::map<std::string, std::string>& oracle) {
  EXPECT_FALSE(model.reml().at_boundary);
  // R 4.2.2 dense oracle: h2, the REML log-likelihood and s2 to 1e-6.
  expect_reference(model.reml().h2, oracle, "reml_h2", 1e-6);
  expect_reference(model.reml().log_likelihood, oracle, "reml_loglik", 1e-9);
  expect_reference(model.reml().sigma2_g + model.reml().sigma2_e, oracle, "reml_s2", 1e-6);
  expect_reference(model.null_ml().h2, oracle, "ml0_h2", 1e-6);
  expect_reference(model.null_ml().log_likelihood, oracle, "ml0_loglik", 1e-9);

  const std::vector<tamis::ScoreResult> scores = whitened_scores(model, cohort);
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    const std::string key = "g" + std::to_string(variant + 1);
    // R 4.2.2 dense oracle: T = (g'Py)^2 / (g'Pg), and the ML confirmation, to 1e-6.
    expect_reference(scores[variant].chisq, oracle, key + "_score", 1e-6);
    const tamis::ConfirmResult result = model.confirm(cohort.variants.col(variant));
    EXPECT_TRUE(result.converged);
    expect_reference(result.wald_chisq, oracle, key + "_wald", 1e-6);
    expect_reference(result.lrt_chisq, oracle, key + "_lr", 1e-6);
    expect_reference(result.beta, oracle, key + "_beta", 1e-6);
    expect_reference(result.se, oracle, key + "_se", 1e-6);
  }
  EXPECT_GT(scores[0].chisq, 10.0) << "the simulated effect of g1 is found";
}

// Source: the dense oracle in base R 4.2.2 (stats::optimize for h2, solve and
// determinant on the full n x n H), tests/reference/mixed_model_dense_oracle.R.
// Each way of factoring the components is checked against it.
void check_against_dense_oracle(const Cohort& cohort, const std::string& name) {
  const std::string dir = tamis::testing::make_temp_dir(name);
  const auto oracle = run_reference("mixed_model_dense_oracle.R", "'" + write_data(cohort, dir) + "' '" +
                                                                      write_pairs(cohort.relatedness, dir) + "'");
  ASSERT_LT(value_of(oracle, "reml_h2"), value_of(oracle, "h2_max") - 0.05) << "the test wants an interior optimum";
  for (const NamedOptions& path : every_factorisation()) {
    SCOPED_TRACE(path.name);
    check_model_against_dense_oracle(MixedModel::fit(cohort.y, cohort.design, cohort.relatedness, path.options),
                                     cohort, oracle);
    report_largest_deviation("the dense oracle in R, " + path.name);
  }
}

TEST(MixedModelReference, GenomicRelatednessMatchesDenseOracle) {
  if (!have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = pedigree_cohort(20260302);
  const Eigen::VectorXd eigenvalues = dense_relatedness(cohort.relatedness).selfadjointView<Eigen::Lower>().eigenvalues();
  ASSERT_GT(eigenvalues.minCoeff(), 0.0);
  check_against_dense_oracle(cohort, "mixed_model_oracle_psd");
}

TEST(MixedModelReference, ThresholdedRelatednessWithANegativeEigenvalueMatchesDenseOracle) {
  if (!have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = thresholded_with_contradiction(pedigree_cohort(20260302), 0.05);
  const Eigen::VectorXd eigenvalues = dense_relatedness(cohort.relatedness).selfadjointView<Eigen::Lower>().eigenvalues();
  ASSERT_LT(eigenvalues.minCoeff(), -0.05);
  ASSERT_GT(eigenvalues.minCoeff(), -0.5);
  check_against_dense_oracle(cohort, "mixed_model_oracle_negative");
}

TEST(MixedModelReference, OneLargeComponentFromPopulationStructureMatchesDenseOracle) {
  if (!have_rscript()) GTEST_SKIP() << "Rscript is not installed";
  const Cohort cohort = structured_cohort(20260304, 260);
  ASSERT_EQ(tamis::related_components(cohort.relatedness).size(), 1u);
  check_against_dense_oracle(cohort, "mixed_model_oracle_structured");
}

// ---------------------------------------------------------------------------
// Dense algebra in C++ and properties.

// T = (g'Py)^2 / (g'Pg) with P = V^-1 - V^-1 X (X'V^-1 X)^-1 X'V^-1 and
// V = s2 H at the REML fit (formula; design notes, "Related samples").
TEST(MixedModel, WhitenedScoreKernelIsTheMixedModelScoreTest) {
  const Cohort cohort = pedigree_cohort(11);
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  const double h2 = model.reml().h2, s2 = model.reml().sigma2_g + model.reml().sigma2_e;
  const Eigen::Index n = cohort.size();
  const Eigen::MatrixXd v =
      s2 * ((1.0 - h2) * Eigen::MatrixXd::Identity(n, n) + h2 * dense_relatedness(cohort.relatedness));
  const Eigen::MatrixXd v_inverse = v.llt().solve(Eigen::MatrixXd::Identity(n, n));
  const Eigen::MatrixXd x = cohort.design;
  const Eigen::MatrixXd p =
      v_inverse - v_inverse * x * (x.transpose() * v_inverse * x).ldlt().solve(x.transpose() * v_inverse);
  const std::vector<tamis::ScoreResult> scores = whitened_scores(model, cohort);
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    const Eigen::VectorXd g = cohort.variants.col(variant);
    const double u = g.dot(p * cohort.y);
    EXPECT_NEAR(scores[variant].chisq, u * u / g.dot(p * g), 1e-9 * scores[variant].chisq);
  }
  // And the GLS coefficients of the whitened OLS fit are the model's.
  const tamis::NullModel whitened = tamis::fit_null_model("trait", tamis::TraitKind::quantitative,
                                                          model.whiten(cohort.y), model.whiten(cohort.design),
                                                          design_names());
  EXPECT_LT((whitened.coefficients - model.coefficients()).norm(), 1e-10 * model.coefficients().norm());
  EXPECT_NEAR(whitened.sigma2, s2, 1e-10 * s2);
}

// Every way of factoring the components gives the eigendecomposition's fit,
// score tests and refits: the paths round differently, and the optimiser's
// tolerance on h2 (about 1e-8) carries into T.
void expect_every_factorisation_agrees(const Cohort& cohort) {
  const std::vector<NamedOptions> paths = every_factorisation();
  const MixedModel reference = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness, paths[0].options);
  const auto reference_scores = whitened_scores(reference, cohort);
  for (std::size_t path_idx = 1; path_idx < paths.size(); ++path_idx) {
    SCOPED_TRACE(paths[path_idx].name);
    const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness, paths[path_idx].options);
    EXPECT_NEAR(model.reml().h2, reference.reml().h2, 1e-7);
    EXPECT_NEAR(model.reml().log_likelihood, reference.reml().log_likelihood, 1e-9);
    EXPECT_NEAR(model.null_ml().h2, reference.null_ml().h2, 1e-7);
    EXPECT_NEAR(model.null_ml().log_likelihood, reference.null_ml().log_likelihood, 1e-9);
    EXPECT_LT((model.coefficients() - reference.coefficients()).norm(), 1e-7 * reference.coefficients().norm());
    const auto scores = whitened_scores(model, cohort);
    for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
      EXPECT_NEAR(scores[variant].chisq, reference_scores[variant].chisq, 1e-6 * reference_scores[variant].chisq);
      const auto expected = reference.confirm(cohort.variants.col(variant));
      const auto result = model.confirm(cohort.variants.col(variant));
      EXPECT_NEAR(result.lrt_chisq, expected.lrt_chisq, 1e-6);
      EXPECT_NEAR(result.wald_chisq, expected.wald_chisq, 1e-6);
    }
  }
}

TEST(MixedModel, EveryFactorisationAgreesOnFamilies) {
  expect_every_factorisation_agrees(thresholded_with_contradiction(pedigree_cohort(12), 0.05));
}

// One component of a few hundred samples, linked by population structure,
// whose sparse factor fills in: the case the tridiagonal reduction is for.
TEST(MixedModel, EveryFactorisationAgreesOnOneLargeComponent) {
  const Cohort cohort = structured_cohort(21, 260);
  ASSERT_EQ(cohort.relatedness.diagonal.size(), 260u);
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  ASSERT_EQ(model.components().size(), 1u);
  ASSERT_GT(model.components()[0].size(), 250u);
  EXPECT_GT(model.reml().h2, 0.2);
  // The thresholding leaves A with a negative eigenvalue, so each path also
  // finds its own bound on h2.
  const Eigen::VectorXd eigenvalues = dense_relatedness(cohort.relatedness).selfadjointView<Eigen::Lower>().eigenvalues();
  ASSERT_LT(eigenvalues.minCoeff(), -0.05);
  expect_every_factorisation_agrees(cohort);
}

// Whitening a block gives each variant the values it gets alone (rows of the
// block in any order, rows not the model's left alone, widths that are not
// a multiple of the dense loop's 8), and W'W = H^-1 at the REML h2.
void expect_block_whitening_is_per_variant(const Cohort& cohort) {
  std::vector<NamedOptions> paths = every_factorisation();
  paths.push_back({"default", tamis::MixedModelOptions()});
  for (const NamedOptions& path : paths) {
    SCOPED_TRACE(path.name);
    const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness, path.options);
    // The block holds two rows that are not the model's (left alone) and the
    // model's samples in reverse order.
    const std::size_t n = static_cast<std::size_t>(cohort.size()), width = static_cast<std::size_t>(cohort.variants.cols()),
                      rows = n + 2;
    std::vector<std::size_t> row_of_sample(n);
    for (std::size_t sample = 0; sample < n; ++sample) row_of_sample[sample] = rows - 1 - sample;
    std::vector<double> block(rows * width, -7.0);
    for (std::size_t sample = 0; sample < n; ++sample)
      for (std::size_t col = 0; col < width; ++col)
        block[row_of_sample[sample] * width + col] = cohort.variants(static_cast<Eigen::Index>(sample), static_cast<Eigen::Index>(col));
    model.whiten_block(block.data(), width, row_of_sample);
    for (std::size_t col = 0; col < width; ++col) {
      const Eigen::VectorXd expected = model.whiten(Eigen::VectorXd(cohort.variants.col(static_cast<Eigen::Index>(col))));
      for (std::size_t sample = 0; sample < n; ++sample)
        EXPECT_EQ(block[row_of_sample[sample] * width + col], expected[static_cast<Eigen::Index>(sample)]);
      EXPECT_EQ(block[0 * width + col], -7.0);
      EXPECT_EQ(block[1 * width + col], -7.0);
    }
    // W'W = H^-1 at the REML h2.
    const Eigen::Index count = cohort.size();
    const Eigen::MatrixXd w = model.whiten(Eigen::MatrixXd(Eigen::MatrixXd::Identity(count, count)));
    const double h2 = model.reml().h2;
    const Eigen::MatrixXd h =
        (1.0 - h2) * Eigen::MatrixXd::Identity(count, count) + h2 * dense_relatedness(cohort.relatedness);
    EXPECT_LT((w.transpose() * w * h - Eigen::MatrixXd::Identity(count, count)).cwiseAbs().maxCoeff(), 1e-9);
  }
}

TEST(MixedModel, WhitenBlockMatchesWhitenColumnByColumn) {
  expect_block_whitening_is_per_variant(pedigree_cohort(13));
  Cohort large = structured_cohort(22, 250);
  large.variants.conservativeResize(Eigen::NoChange, 3);
  expect_block_whitening_is_per_variant(large);
}

TEST(MixedModel, ResultsDoNotDependOnTheSampleOrder) {
  const Cohort cohort = pedigree_cohort(14);
  std::vector<int> new_index(static_cast<std::size_t>(cohort.size()));
  std::iota(new_index.begin(), new_index.end(), 0);
  std::shuffle(new_index.begin(), new_index.end(), std::mt19937_64(5));
  const Cohort shuffled = permuted(cohort, new_index);
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  const MixedModel other = MixedModel::fit(shuffled.y, shuffled.design, shuffled.relatedness);
  // Rounding differs with the order; a search on likelihood values places h2
  // to about 1e-8 (the likelihood is flat at its maximum), and T follows.
  EXPECT_NEAR(other.reml().h2, model.reml().h2, 1e-7);
  EXPECT_NEAR(other.reml().log_likelihood, model.reml().log_likelihood, 1e-9);
  EXPECT_NEAR(other.null_ml().log_likelihood, model.null_ml().log_likelihood, 1e-9);
  EXPECT_LT((other.coefficients() - model.coefficients()).norm(), 1e-8);
  EXPECT_EQ(other.components().size(), model.components().size());
  const auto scores = whitened_scores(model, cohort), other_scores = whitened_scores(other, shuffled);
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    EXPECT_NEAR(other_scores[variant].chisq, scores[variant].chisq, 1e-6 * scores[variant].chisq);
    EXPECT_NEAR(other.confirm(shuffled.variants.col(variant)).lrt_chisq,
                model.confirm(cohort.variants.col(variant)).lrt_chisq, 1e-7);
  }
}

// With no pairs and a unit diagonal, H = I whatever h2: the fit is the
// ordinary linear model (formulas of the plain model, src/model).
TEST(MixedModel, UnrelatedSamplesGiveTheOrdinaryLinearModel) {
  Cohort cohort = family_cohort(15, 150);
  cohort.relatedness.pairs.clear();
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  const tamis::NullModel ols =
      tamis::fit_null_model("trait", tamis::TraitKind::quantitative, cohort.y, cohort.design, design_names());
  EXPECT_EQ(model.reml().h2, 0.0);
  EXPECT_TRUE(model.reml().at_boundary);
  EXPECT_EQ(model.reml().sigma2_g, 0.0);
  EXPECT_NEAR(model.reml().sigma2_e, ols.sigma2, 1e-12 * ols.sigma2);
  EXPECT_NEAR(model.null_ml().log_likelihood, ols.log_likelihood, 1e-10 * std::fabs(ols.log_likelihood));
  EXPECT_LT((model.coefficients() - ols.coefficients).norm(), 1e-10 * ols.coefficients.norm());
  EXPECT_TRUE(model.components().empty());
  const double n = cohort.size(), p = 3;
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) {
    const tamis::ConfirmResult mixed = model.confirm(cohort.variants.col(variant));
    const tamis::ConfirmResult plain = tamis::confirm_variant(ols, cohort.variants.col(variant));
    EXPECT_NEAR(mixed.lrt_chisq, plain.lrt_chisq, 1e-9 * plain.lrt_chisq);
    EXPECT_NEAR(mixed.beta, plain.beta, 1e-10 * std::fabs(plain.beta));
    // The plain Wald uses s2 = RSS1 / (n - p - 1), the ML one RSS1 / n.
    EXPECT_NEAR(mixed.wald_chisq, plain.wald_chisq * n / (n - p - 1), 1e-9 * plain.wald_chisq);
  }
  // The whitening is the identity.
  EXPECT_EQ(model.whiten(cohort.y), cohort.y);
}

TEST(MixedModel, NegativeWithinFamilyCorrelationPutsH2OnTheBoundary) {
  Cohort cohort = family_cohort(16, 120);
  // Within every family y sums to the same value: members are negatively correlated.
  for (std::size_t start = 0; start < cohort.family.size();) {
    std::size_t end = start;
    while (end < cohort.family.size() && cohort.family[end] == cohort.family[start]) ++end;
    const double mean = cohort.y.segment(start, end - start).mean();
    if (end - start > 1) cohort.y.segment(start, end - start).array() -= mean - 3.0;
    start = end;
  }
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  EXPECT_EQ(model.reml().h2, 0.0);
  EXPECT_TRUE(model.reml().at_boundary);
  EXPECT_EQ(model.null_ml().h2, 0.0);
  const tamis::NullModel ols =
      tamis::fit_null_model("trait", tamis::TraitKind::quantitative, cohort.y, cohort.design, design_names());
  EXPECT_NEAR(model.reml().sigma2_e, ols.sigma2, 1e-12 * ols.sigma2);
}

TEST(MixedModel, GenotypeInTheCovariateSpanIsNotEstimable) {
  const Cohort cohort = family_cohort(17, 60);
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  const tamis::ConfirmResult result = model.confirm(2.0 * cohort.design.col(2) + 1.0 * cohort.design.col(0));
  tamis::testing::expect_not_estimable(result);
}

TEST(MixedModel, CollinearDesignColumnsAreDroppedAsInThePlainModel) {
  const Cohort cohort = family_cohort(18, 80);
  Eigen::MatrixXd design(cohort.size(), 4);
  design << cohort.design.leftCols(2), 3.0 * cohort.design.col(1), cohort.design.col(2);
  const MixedModel model = MixedModel::fit(cohort.y, cohort.design, cohort.relatedness);
  const MixedModel with_copy = MixedModel::fit(cohort.y, design, cohort.relatedness);
  EXPECT_NEAR(with_copy.reml().h2, model.reml().h2, 1e-9);
  EXPECT_NEAR(with_copy.reml().log_likelihood, model.reml().log_likelihood, 1e-8);
  ASSERT_EQ(with_copy.coefficients().size(), 3);
  EXPECT_LT((with_copy.coefficients() - model.coefficients()).norm(), 1e-8);
}

TEST(MixedModel, AMatrixThatAdmitsNoUsefulH2IsRefusedNamingItsSamples) {
  Cohort cohort = family_cohort(19, 60);
  cohort.relatedness.pairs.clear();
  cohort.relatedness.pairs.push_back({3, 9, 2.5});  // eigenvalues 1 +- 2.5: H factors only for h2 < 0.4
  for (NamedOptions path : every_factorisation(1)) {
    SCOPED_TRACE(path.name);
    path.options.sample_label = [](std::uint32_t sample) { return "saltmarsh_" + std::to_string(sample); };
    try {
      MixedModel::fit(cohort.y, cohort.design, cohort.relatedness, path.options);
      ADD_FAILURE() << "expected an error";
    } catch (const tamis::Error& error) {
      EXPECT_EQ(error.code(), tamis::ExitCode::model);
      EXPECT_NE(error.problem().find("saltmarsh_3, saltmarsh_9"), std::string::npos) << error.problem();
      EXPECT_NE(error.fix().find("--keep-above"), std::string::npos) << error.fix();
    }
  }
}

// The choice between the dense and the sparse path reads the size of the
// sparse factor from the symbolic analysis alone; Eigen's SimplicialLLT with
// the same (AMD) ordering builds the factor itself.
TEST(MixedModel, SparseFactorSharesMatchTheFactorEigenBuilds) {
  for (const Cohort& cohort : {structured_cohort(23, 200), thresholded_with_contradiction(pedigree_cohort(24), 0.05)}) {
    for (const auto& samples : tamis::related_components(cohort.relatedness)) {
      tamis::detail::RelatedComponent component;
      component.samples = samples;
      std::vector<int> local(cohort.relatedness.sample_count, -1);
      for (std::size_t local_idx = 0; local_idx < samples.size(); ++local_idx) {
        local[samples[local_idx]] = static_cast<int>(local_idx);
        component.diagonal.push_back(cohort.relatedness.diagonal[samples[local_idx]]);
      }
      std::vector<Eigen::Triplet<double>> h_entries;
      for (const auto& pair : cohort.relatedness.pairs) {
        if (local[pair.first] < 0) continue;
        component.pairs.emplace_back(local[pair.second], local[pair.first], pair.value);
        h_entries.emplace_back(local[pair.second], local[pair.first], 0.3 * pair.value);
      }
      const auto size = static_cast<int>(samples.size());
      for (int local_idx = 0; local_idx < size; ++local_idx)
        h_entries.emplace_back(local_idx, local_idx, 0.7 + 0.3 * component.diagonal[static_cast<std::size_t>(local_idx)]);
      Eigen::SparseMatrix<double> h(size, size);
      h.setFromTriplets(h_entries.begin(), h_entries.end());
      const Eigen::SimplicialLLT<Eigen::SparseMatrix<double>, Eigen::Lower, Eigen::AMDOrdering<int>> factor(h);
      ASSERT_EQ(factor.info(), Eigen::Success);
      const Eigen::SparseMatrix<double> lower = factor.matrixL();
      double work = 0.0, dense_work = 0.0;
      for (int col = 0; col < size; ++col) {
        const double count = lower.outerIndexPtr()[col + 1] - lower.outerIndexPtr()[col];
        work += count * count;
        dense_work += static_cast<double>(size - col) * (size - col);
      }
      const tamis::detail::SparseFactorShares shares = tamis::detail::sparse_factor_shares(component);
      EXPECT_NEAR(shares.entries * size * (size + 1) / 2, static_cast<double>(lower.nonZeros()), 1e-6);
      EXPECT_NEAR(shares.work, work / dense_work, 1e-12);
    }
  }
}

TEST(MixedModel, ConstantTraitIsRefusedAsByThePlainModel) {
  Cohort cohort = family_cohort(20, 40);
  cohort.y.setConstant(2.0);
  EXPECT_THROW(MixedModel::fit(cohort.y, cohort.design, cohort.relatedness), tamis::Error);
}

}  // namespace
