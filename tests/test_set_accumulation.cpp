// The scan's side of the set tests: the scores and covariance a set test
// reads, assembled from each variant's sparse column and projections, must
// equal the dense formulas; sets close when the stream passes them and go
// out per chromosome sorted by start.
#include <gtest/gtest.h>

#include <Eigen/Dense>
#include <cmath>
#include <random>

#include "scan/set_accumulator.hpp"
#include "scan/trait_pass.hpp"
#include "support/test_support.hpp"
#include "tamis/distributions.hpp"
#include "tamis/errors.hpp"
#include "tamis/set_tests.hpp"

namespace tamis {
namespace {

struct Cohort {
  Eigen::VectorXd y;
  Eigen::MatrixXd design;
  Eigen::MatrixXd genotypes;  // n x m, rare variants
};

Cohort make_cohort(std::uint32_t seed, int samples, int variants, bool binary) {
  std::mt19937_64 random(seed);
  std::normal_distribution<double> normal(0.0, 1.0);
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  Cohort cohort;
  cohort.design.resize(samples, 3);
  cohort.y.resize(samples);
  for (int sample = 0; sample < samples; ++sample) {
    cohort.design(sample, 0) = 1.0;
    cohort.design(sample, 1) = normal(random);
    cohort.design(sample, 2) = uniform(random) < 0.5 ? 1.0 : 0.0;
    const double linear = 0.3 * cohort.design(sample, 1) - 0.2 * cohort.design(sample, 2);
    cohort.y[sample] = binary ? (uniform(random) < 1.0 / (1.0 + std::exp(-(linear - 1.0))) ? 1.0 : 0.0)
                              : linear + normal(random);
  }
  cohort.genotypes = Eigen::MatrixXd::Zero(samples, variants);
  for (int variant = 0; variant < variants; ++variant) {
    const double frequency = 0.002 + 0.01 * uniform(random);
    for (int sample = 0; sample < samples; ++sample) {
      cohort.genotypes(sample, variant) = (uniform(random) < frequency) + (uniform(random) < frequency);
    }
    // One variant coded on its major allele: the set tests must count the minor one.
    if (variant == 1) cohort.genotypes.col(variant) = 2.0 - cohort.genotypes.col(variant).array();
  }
  return cohort;
}

TraitContext make_trait(const Cohort& cohort, bool binary) {
  TraitContext trait;
  trait.set.kind = binary ? TraitKind::binary : TraitKind::quantitative;
  trait.set.genotype_index.resize(static_cast<std::size_t>(cohort.y.size()));
  for (std::size_t sample = 0; sample < trait.set.genotype_index.size(); ++sample) trait.set.genotype_index[sample] = sample;
  trait.model = fit_null_model("trait", trait.set.kind, cohort.y, cohort.design, {"intercept", "age", "site"});
  return trait;
}

// A variant's evidence as the per-trait stage collects it.
SetVariant evidence_of(const TraitContext& trait, const Eigen::VectorXd& genotype, std::int64_t position,
                       std::uint32_t set_index) {
  const NullModel& model = trait.model;
  SetVariant variant;
  variant.variant_id = "3_" + std::to_string(position) + "_A_G";
  variant.chromosome = "3";
  variant.contig_key = "3";
  variant.position = position;
  const double frequency = genotype.mean() / 2.0;
  variant.minor_allele_frequency = std::min(frequency, 1.0 - frequency);
  variant.sign = frequency > 0.5 ? -1.0 : 1.0;
  variant.mac = std::min(genotype.sum(), 2.0 * genotype.size() - genotype.sum());
  variant.u = genotype.dot(model.residuals);
  const Eigen::VectorXd projections = model.basis.transpose() * (model.weights.array().sqrt() * genotype.array()).matrix();
  variant.projections.assign(projections.data(), projections.data() + projections.size());
  for (Eigen::Index sample = 0; sample < genotype.size(); ++sample) {
    if (genotype[sample] == 0.0) continue;
    variant.column.samples.push_back(static_cast<std::uint32_t>(sample));
    variant.column.values.push_back(genotype[sample]);
  }
  const double chisq = variant.u * variant.u /
                       ((model.kind == TraitKind::quantitative ? model.sigma2 : 1.0) *
                        (genotype.dot((model.weights.array() * genotype.array()).matrix()) - projections.squaredNorm()));
  variant.log_p = log_chisq1_upper_tail(chisq);
  variant.sets.push_back({set_index, std::numeric_limits<double>::quiet_NaN()});
  return variant;
}

// The score covariance from its definition: the projection P onto the
// orthogonal complement of the covariates, in the metric of the null model's
// weights (formula: Phi = G' (W - W X (X'WX)^-1 X'W) G, times sigma^2 for a
// quantitative trait).
Eigen::MatrixXd dense_covariance(const NullModel& model, const Eigen::MatrixXd& genotypes) {
  const Eigen::MatrixXd& x = model.design;
  const Eigen::VectorXd& w = model.weights;
  const Eigen::MatrixXd wx = w.asDiagonal() * x;
  const Eigen::MatrixXd projection =
      Eigen::MatrixXd(w.asDiagonal()) - wx * (x.transpose() * wx).ldlt().solve(wx.transpose());
  const double scale = model.kind == TraitKind::quantitative ? model.sigma2 : 1.0;
  return scale * genotypes.transpose() * projection * genotypes;
}

void expect_tests_match_dense(bool binary) {
  const Cohort cohort = make_cohort(binary ? 11 : 7, 600, 8, binary);
  const TraitContext trait = make_trait(cohort, binary);
  SetScanOptions options;
  options.weighting = SetWeighting::flat;
  options.exact_below = 1.0;  // every set with the exact tails
  std::vector<std::shared_ptr<const SetVariant>> variants;
  for (int variant = 0; variant < cohort.genotypes.cols(); ++variant) {
    variants.push_back(std::make_shared<const SetVariant>(
        evidence_of(trait, cohort.genotypes.col(variant), 1000 + variant, 0)));
  }
  const SetResultRow row = test_set_variants(trait, options, "SRG7", variants, std::vector<double>(variants.size(), NAN));
  // The screen's saddlepoint and moment-matched tails stay within a few
  // percent of the exact ones (Kuonen 1999 reports errors of this size).
  options.exact_below = 1e-300;
  const SetResultRow screened =
      test_set_variants(trait, options, "SRG7", variants, std::vector<double>(variants.size(), NAN));
  EXPECT_NEAR(std::exp(screened.variance_log_p), std::exp(row.variance_log_p), 0.05 * std::exp(row.variance_log_p));
  EXPECT_NEAR(std::exp(screened.optimal_log_p), std::exp(row.optimal_log_p), 0.05 * std::exp(row.optimal_log_p));
  EXPECT_EQ(screened.burden_log_p, row.burden_log_p) << "the burden's chi-square(1) tail is exact in both";

  // Minor-allele coding: variant 1 is flipped back before the dense formulas.
  Eigen::MatrixXd minor = cohort.genotypes;
  minor.col(1) = 2.0 - minor.col(1).array();
  const Eigen::VectorXd u = minor.transpose() * trait.model.residuals;
  const Eigen::MatrixXd covariance = dense_covariance(trait.model, minor);
  const double burden = u.sum();
  const double burden_variance = covariance.sum();
  EXPECT_NEAR(row.burden_chisq, burden * burden / burden_variance, 1e-9 * row.burden_chisq);
  EXPECT_NEAR(row.variance_q, u.squaredNorm(), 1e-9 * row.variance_q);
  const SetTestResult dense = test_variant_set(u, covariance, Eigen::VectorXd::Ones(u.size()));
  EXPECT_NEAR(row.variance_log_p, dense.variance_log_p, 1e-6 * std::abs(dense.variance_log_p) + 1e-12);
  EXPECT_NEAR(row.optimal_log_p, dense.optimal_log_p, 1e-6 * std::abs(dense.optimal_log_p) + 1e-12);
  EXPECT_EQ(row.n_variants, 8u);
  EXPECT_EQ(row.weights, "flat");
}

TEST(SetAccumulation, ScoresAndCovarianceEqualTheDenseFormulasForAQuantitativeTrait) {
  expect_tests_match_dense(false);
}

TEST(SetAccumulation, ScoresAndCovarianceEqualTheDenseFormulasForABinaryTrait) { expect_tests_match_dense(true); }

TEST(SetAccumulation, CollapsingSumsTheUltraRareVariantsIntoOne) {
  const Cohort cohort = make_cohort(5, 500, 6, false);
  const TraitContext trait = make_trait(cohort, false);
  SetScanOptions options;
  options.weighting = SetWeighting::flat;
  options.collapse_mac = 1e9;  // every variant is "ultra-rare": one unit, the sum of all
  std::vector<std::shared_ptr<const SetVariant>> variants;
  for (int variant = 0; variant < cohort.genotypes.cols(); ++variant) {
    variants.push_back(std::make_shared<const SetVariant>(
        evidence_of(trait, cohort.genotypes.col(variant), 1000 + variant, 0)));
  }
  const SetResultRow collapsed = test_set_variants(trait, options, "SRG2", variants, std::vector<double>(6, NAN));
  EXPECT_EQ(collapsed.n_collapsed, 6u);
  // One unit: every test is the burden of the summed minor-allele counts.
  EXPECT_NEAR(collapsed.variance_log_p, collapsed.burden_log_p, 1e-8 * std::abs(collapsed.burden_log_p));
  options.collapse_mac = 0.0;
  const SetResultRow apart = test_set_variants(trait, options, "SRG2", variants, std::vector<double>(6, NAN));
  EXPECT_EQ(apart.n_collapsed, 0u);
  EXPECT_NEAR(apart.burden_chisq, collapsed.burden_chisq, 1e-9 * apart.burden_chisq);
}

// The accumulator on a made-up stream: three sets on contig 3 (one inside
// another), one on contig 5.
class AccumulatorStream : public ::testing::Test {
 protected:
  void SetUp() override {
    dir_ = tamis::testing::make_temp_dir("set_accumulation");
    const std::string bed = dir_ + "/genes.bed";
    tamis::testing::write_text_file(bed,
                                    "3\t999\t1010\tSRG1\n"
                                    "3\t1001\t1003\tSRG2\n"
                                    "3\t1500\t1600\tSRG3\n"
                                    "5\t10\t2000\tSRG4\n");
    sets_ = VariantSets::load(bed);
    cohort_ = make_cohort(3, 400, 12, false);
    trait_ = make_trait(cohort_, false);
  }

  SetVariant variant_at(const std::string& contig, std::int64_t position, int column) {
    SetVariant variant = evidence_of(trait_, cohort_.genotypes.col(column), position, 0);
    variant.contig_key = contig;
    variant.chromosome = contig;
    variant.sets.clear();
    sets_.find_sets(contig, position, ".", "A", "G", variant.sets);
    return variant;
  }

  std::string dir_;
  VariantSets sets_;
  Cohort cohort_;
  TraitContext trait_;
};

TEST_F(AccumulatorStream, SetsCloseWhenPassedAndLeavePerChromosomeSortedByStart) {
  SetScanOptions options;
  SetAccumulator accumulator(sets_, options, trait_);
  std::string rows;
  std::vector<SetVariant> block = {variant_at("3", 1000, 0), variant_at("3", 1002, 1), variant_at("3", 1003, 2)};
  accumulator.add_block(block, "3", 1003);
  accumulator.take_rows(rows);
  EXPECT_EQ(rows, "");  // SRG1 and SRG2 are still open (SRG2 ends at 1003)
  block = {variant_at("3", 1005, 3), variant_at("3", 1550, 4)};
  accumulator.add_block(block, "3", 1550);
  accumulator.take_rows(rows);
  EXPECT_EQ(rows, "");  // SRG1 and SRG2 are tested, but contig 3 is not finished
  block = {variant_at("5", 20, 5)};
  accumulator.add_block(block, "5", 20);
  accumulator.take_rows(rows);
  const std::vector<std::vector<std::string>> contig3 = tamis::testing::data_rows("header\n" + rows);
  ASSERT_EQ(contig3.size(), 3u);
  EXPECT_EQ(contig3[0][0], "SRG1");
  EXPECT_EQ(contig3[0][2], "1000");  // BED start 999 is 1-based 1000
  EXPECT_EQ(contig3[0][3], "1010");
  EXPECT_EQ(contig3[0][4], "4");
  EXPECT_EQ(contig3[1][0], "SRG2");
  EXPECT_EQ(contig3[1][4], "2");
  EXPECT_EQ(contig3[2][0], "SRG3");
  accumulator.finish();
  rows.clear();
  accumulator.take_rows(rows);
  const std::vector<std::vector<std::string>> contig5 = tamis::testing::data_rows("header\n" + rows);
  ASSERT_EQ(contig5.size(), 1u);
  EXPECT_EQ(contig5[0][0], "SRG4");
  EXPECT_EQ(accumulator.tally().tested, 4u);
}

TEST_F(AccumulatorStream, ASavedStateContinuesAsIfNeverInterrupted) {
  SetScanOptions options;
  SetAccumulator straight(sets_, options, trait_), interrupted(sets_, options, trait_);
  std::vector<std::vector<SetVariant>> blocks = {
      {variant_at("3", 1000, 0), variant_at("3", 1002, 1)}, {variant_at("3", 1005, 3), variant_at("3", 1550, 4)},
      {variant_at("5", 20, 5), variant_at("5", 30, 6)}};
  std::vector<std::int64_t> ends = {1002, 1550, 30};
  std::vector<std::string> contigs = {"3", "3", "5"};
  std::string expected, resumed;
  for (std::size_t block_idx = 0; block_idx < blocks.size(); ++block_idx) {
    std::vector<SetVariant> copy = blocks[block_idx];
    straight.add_block(copy, contigs[block_idx], ends[block_idx]);
  }
  straight.finish();
  straight.take_rows(expected);

  std::vector<SetVariant> first = blocks[0];
  interrupted.add_block(first, "3", 1002);
  interrupted.take_rows(resumed);
  std::string bytes;
  interrupted.save(bytes);
  SetAccumulator restored(sets_, options, trait_);
  std::size_t offset = 0;
  restored.restore(bytes, offset, "test state");
  EXPECT_EQ(offset, bytes.size());
  for (std::size_t block_idx = 1; block_idx < blocks.size(); ++block_idx) {
    restored.add_block(blocks[block_idx], contigs[block_idx], ends[block_idx]);
  }
  restored.finish();
  restored.take_rows(resumed);
  EXPECT_EQ(resumed, expected);
  EXPECT_EQ(restored.tally().tested, straight.tally().tested);

  std::size_t short_offset = 0;
  EXPECT_THROW(restored.restore(bytes.substr(0, bytes.size() / 2), short_offset, "test state"), Error);
}

}  // namespace
}  // namespace tamis
