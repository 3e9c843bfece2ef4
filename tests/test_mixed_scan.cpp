// Mixed-model scans end to end: `tamis relatedness` then `tamis scan
// --relatedness` on simulated family cohorts. A plain scan of a null family
// cohort with a heritable trait is inflated; the mixed model is calibrated.
// The comparisons with lme4 and a dense oracle are in tests/reference and
// tests/test_mixed_model.cpp.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "support/calibration.hpp"
#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

constexpr int kSeeds[] = {3, 4, 5};
const std::string kCovariates = "age,sex,village,pc1,pc2,pc3,pc4";

std::string cohort_prefix(const std::string& dir, int seed) { return dir + "/cohort" + std::to_string(seed); }

std::string simulate_command(const std::string& cohort, int seed, int samples, int variants) {
  return tamis_binary() + " simulate --out " + cohort + " --samples " + std::to_string(samples) + " --variants " +
         std::to_string(variants) + " --causal 0 --families 0.6 --heritability 0.6 --seed " + std::to_string(seed) +
         " 2>/dev/null";
}

// With only a few thousand markers an unrelated pair's estimate has an SD
// of about 1/sqrt(M) (0.013 at 6,000), so the default floor of 0.05 would
// keep many chance pairs; 0.1 keeps the relatives down to most cousins.
std::string relatedness_command(const std::string& cohort) {
  return tamis_binary() + " relatedness --genotypes " + cohort + ".vcf.gz --keep-above 0.1 --threads 2 --quiet --out " +
         cohort;
}

std::string scan_command(const std::string& dir, int seed, const std::string& name, const std::string& extra,
                         int threads = 2) {
  const std::string cohort = cohort_prefix(dir, seed);
  return tamis_binary() + " scan --genotypes " + cohort + ".vcf.gz --traits " + cohort +
         ".traits.tsv --trait fev1_litres --covariates " + kCovariates + " --threads " + std::to_string(threads) +
         " --quiet --out " + dir + "/" + name + std::to_string(seed) + " " + extra;
}

std::string results_path(const std::string& dir, const std::string& name, int seed) {
  return dir + "/" + name + std::to_string(seed) + ".fev1_litres.tsv.gz";
}

// ctest runs every test in a process of its own, so each fixture's set-up
// runs once per test: the three large cohorts serve the one calibration
// test, and one small cohort serves the rest.
class MixedCalibration : public ::testing::Test {
 protected:
  // Three null cohorts (no planted variant) of 2,000 samples, 60% of them in
  // families, with a polygenic component of h^2 = 0.6 on loci outside the
  // VCF: every variant written is null, and relatives share the trait.
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("mixed_calibration");
    for (int seed : kSeeds) {
      const std::string cohort = cohort_prefix(dir_, seed);
      ASSERT_EQ(run_command(simulate_command(cohort, seed, 2000, 6000)), 0);
      ASSERT_EQ(run_command(relatedness_command(cohort)), 0);
      ASSERT_EQ(run_command(scan_command(dir_, seed, "plain", "")), 0);
      ASSERT_EQ(run_command(scan_command(dir_, seed, "mixed", "--relatedness " + cohort + ".relatedness.tsv.gz")), 0);
    }
  }
  static std::string dir_;
};
std::string MixedCalibration::dir_;

class MixedScan : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("mixed_scan");
    ASSERT_EQ(run_command(simulate_command(cohort_prefix(dir_, kSeed), kSeed, 1000, 2000)), 0);
    ASSERT_EQ(run_command(relatedness_command(cohort_prefix(dir_, kSeed))), 0);
  }
  static std::string cohort() { return cohort_prefix(dir_, kSeed); }
  static std::string matrix() { return "--relatedness " + cohort() + ".relatedness.tsv.gz"; }
  static std::string scan(const std::string& name, const std::string& extra, int threads = 2) {
    return scan_command(dir_, kSeed, name, extra, threads);
  }
  static std::string results_of(const std::string& name) { return results_path(dir_, name, kSeed); }
  static constexpr int kSeed = 4;
  static std::string dir_;
};
std::string MixedScan::dir_;

std::size_t column_of(const std::string& header, const std::string& name) {
  const std::vector<std::string> names = split_fields(header);
  return static_cast<std::size_t>(std::find(names.begin(), names.end(), name) - names.begin());
}

// The score statistics and p-values of every row of the scans of all seeds.
struct Pooled {
  std::vector<double> chisq;
  std::size_t below_one_percent = 0;
};

Pooled pool_scans(const std::vector<std::string>& paths) {
  Pooled pooled;
  for (const std::string& path : paths) {
    const std::string text = read_gzip_file(path);
    const std::string header = text.substr(0, text.find('\n'));
    const std::size_t chisq_column = column_of(header, "score_chisq");
    const std::size_t p_column = column_of(header, "score_p");
    for (const auto& fields : data_rows(text)) {
      pooled.chisq.push_back(std::stod(fields.at(chisq_column)));
      if (std::stod(fields.at(p_column)) < 0.01) ++pooled.below_one_percent;
    }
  }
  return pooled;
}

std::vector<std::string> scans_named(const std::string& name, const std::string& dir) {
  std::vector<std::string> paths;
  for (int seed : kSeeds) paths.push_back(results_path(dir, name, seed));
  return paths;
}

TEST_F(MixedCalibration, PlainScanIsInflatedAndTheMixedModelIsCalibrated) {
  const Pooled plain = pool_scans(scans_named("plain", dir_));
  const Pooled mixed = pool_scans(scans_named("mixed", dir_));
  ASSERT_GT(mixed.chisq.size(), 15000u);
  EXPECT_EQ(plain.chisq.size(), mixed.chisq.size());
  const double plain_lambda = lambda_gc(plain.chisq);
  const double mixed_lambda = lambda_gc(mixed.chisq);
  std::printf("lambda_gc over %zu variants: plain %.4f, mixed %.4f\n", mixed.chisq.size(), plain_lambda,
              mixed_lambda);
  EXPECT_GT(plain_lambda, 1.1) << "relatives share genotypes and trait";
  EXPECT_GE(mixed_lambda, 0.95);
  EXPECT_LE(mixed_lambda, 1.05);

  // Type-I error at 0.01: every variant is null, so the count below 0.01 is
  // Binomial(n, 0.01) up to the correlation of neighbouring variants.
  const auto [lo, hi] = binomial_bounds(mixed.chisq.size(), 0.01);
  std::printf("p < 0.01: plain %zu, mixed %zu; binomial 99.9%% bounds [%zu, %zu]\n", plain.below_one_percent,
              mixed.below_one_percent, lo, hi);
  EXPECT_GE(mixed.below_one_percent, lo);
  EXPECT_LE(mixed.below_one_percent, hi);
  EXPECT_GT(plain.below_one_percent, hi) << "the plain scan's excess of small p-values";
}

TEST_F(MixedScan, LogAndSidecarReportTheModelAndTheMatrix) {
  ASSERT_EQ(run_command(scan("mixed", matrix())), 0);
  const std::string log = read_text_file(dir_ + "/mixed4.log");
  EXPECT_NE(log.find("relatedness: " + cohort() + ".relatedness.tsv.gz: 1000 samples"), std::string::npos) << log;
  EXPECT_NE(log.find("null model fev1_litres: linear mixed model by REML, h^2 = "), std::string::npos) << log;
  EXPECT_NE(log.find("related groups (largest "), std::string::npos);
  const std::string sidecar = read_text_file(results_of("mixed") + "-meta.yaml");
  EXPECT_NE(sidecar.find("tamis_relatedness: cohort4.relatedness.tsv.gz md5 "), std::string::npos) << sidecar;
}

TEST_F(MixedScan, OneAndFourThreadsGiveIdenticalFiles) {
  ASSERT_EQ(run_command(scan("one", matrix() + " --confirm-below 0.01", 1)), 0);
  ASSERT_EQ(run_command(scan("four", matrix() + " --confirm-below 0.01", 4)), 0);
  EXPECT_TRUE(read_text_file(results_of("one")) == read_text_file(results_of("four")));
  EXPECT_TRUE(read_text_file(results_of("one") + ".tbi") == read_text_file(results_of("four") + ".tbi"));
}

TEST_F(MixedScan, ShardsMergeToTheWholeScan) {
  ASSERT_EQ(run_command(scan("whole", matrix())), 0);
  for (const std::string shard : {"1/2", "2/2"}) {
    ASSERT_EQ(run_command(scan(std::string("shard") + shard[0] + "_", matrix() + " --shard " + shard)), 0);
  }
  ASSERT_EQ(run_command(tamis_binary() + " merge --out " + dir_ + "/merged4 " + dir_ + "/shard1_4 " + dir_ +
                        "/shard2_4 2>/dev/null"),
            0);
  EXPECT_TRUE(read_gzip_file(results_of("whole")) == read_gzip_file(results_of("merged")));
}

TEST_F(MixedScan, ResumeAfterAKillGivesTheWholeScan) {
  const std::string options = matrix() + " --checkpoint-blocks 2";
  ASSERT_EQ(run_command(scan("whole", options)), 0);
  EXPECT_EQ(run_command("TAMIS_TEST_SIGNAL_AFTER_BLOCK=9:KILL " + scan("killed", options) + " 2>/dev/null"), 137);
  ASSERT_EQ(run_command(scan("killed", options + " --resume")), 0);
  EXPECT_TRUE(read_text_file(results_of("whole")) == read_text_file(results_of("killed")));
}

TEST_F(MixedScan, ConfirmRefitsChosenVariantsUnderTheMixedModel) {
  ASSERT_EQ(run_command(scan("mixed", matrix())), 0);
  const std::string text = read_gzip_file(results_of("mixed"));
  const std::string header = text.substr(0, text.find('\n'));
  const auto rows = data_rows(text);
  const std::size_t id_column = column_of(header, "variant_id");
  std::string chosen;
  for (std::size_t row_idx = 0; row_idx < 5; ++row_idx) {
    const std::vector<std::string> parts = split_fields(rows.at(row_idx * 100).at(id_column), '_');
    chosen += parts.at(0) + ":" + parts.at(1) + ":" + parts.at(2) + ":" + parts.at(3) + "\n";
  }
  const std::string list = dir_ + "/chosen.txt";
  write_text_file(list, chosen);
  ASSERT_EQ(run_command(tamis_binary() + " confirm --genotypes " + cohort() + ".vcf.gz --traits " + cohort() +
                        ".traits.tsv --trait fev1_litres --covariates " + kCovariates + " " + matrix() +
                        " --variants " + list + " --quiet --out " + dir_ + "/confirmed4"),
            0);
  const auto confirmed = data_rows(read_gzip_file(results_of("confirmed")));
  ASSERT_EQ(confirmed.size(), 5u);
  const std::size_t test_column = column_of(header, "test");
  for (const auto& fields : confirmed) EXPECT_EQ(fields.at(test_column), "lrt");
}

TEST_F(MixedScan, SamplesTheGenotypesLackAreCountedAndIgnored) {
  const std::string file = dir_ + "/with_strangers.tsv";
  write_text_file(file, "sample_1\tsample_2\trelatedness\n"
                        "SR00001\tSR00002\t0.5\n"
                        "SR00001\tvisitor_01\t0.5\n"
                        "visitor_02\tvisitor_02\t1.0\n");
  ASSERT_EQ(run_command(scan("strangers", "--relatedness " + file)), 0);
  const std::string log = read_text_file(dir_ + "/strangers4.log");
  EXPECT_NE(log.find("note: 2 sample IDs of the relatedness matrix are not in the genotype files and are ignored "
                     "(visitor_01, visitor_02)"),
            std::string::npos)
      << log;
  EXPECT_NE(log.find("note: 998 genotype samples have no entry in the relatedness matrix"), std::string::npos);
}

TEST_F(MixedScan, AMatrixThatCannotBeFactoredNamesItsSamples) {
  // Relatedness 3 between two samples gives A the eigenvalue -2, so
  // V = s2_e I + s2_g A is not positive definite beyond h^2 = 1/3.
  const std::string file = dir_ + "/impossible.tsv";
  write_text_file(file, "sample_1\tsample_2\trelatedness\nSR00001\tSR00002\t3\n");
  int code = 0;
  const std::string message = capture_command(scan("impossible", "--relatedness " + file) + " 2>&1", &code);
  EXPECT_NE(code, 0) << message;
  EXPECT_NE(message.find("SR00001"), std::string::npos) << message;
  EXPECT_NE(message.find("--keep-above"), std::string::npos) << message;
  EXPECT_FALSE(file_exists(results_of("impossible")));
}

}  // namespace
}  // namespace tamis::testing
