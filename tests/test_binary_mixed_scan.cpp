// Mixed-model scans of binary traits end to end: `tamis relatedness`, then
// `tamis scan --relatedness` of winter_wheeze (a logistic mixed null model,
// saddlepoint-calibrated score tests, Laplace-likelihood confirmation). On
// null family cohorts the plain logistic scan has too many small p-values
// and the mixed model does not; the comparisons with R (glmmPQL, glmer and
// a dense oracle) are in tests/reference and tests/test_logistic_mixed_model.cpp.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstdio>
#include <stdexcept>
#include <string>
#include <utility>
#include <vector>

#include "support/calibration.hpp"
#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

const std::string kCovariates = "age,sex,village,pc1,pc2,pc3,pc4";
const std::string kTrait = "winter_wheeze";

std::string simulate_command(const std::string& cohort, int seed, const std::string& shape) {
  return tamis_binary() + " simulate --out " + cohort + " --seed " + std::to_string(seed) + " " + shape +
         " 2>/dev/null";
}

// Kept from 0.1, as in tests/test_mixed_scan.cpp: with a few thousand
// markers an unrelated pair's estimate has an SD of about 0.013, so 0.1 keeps
// the relatives (down to most first cousins, 0.125) and no chance pairs.
std::string relatedness_command(const std::string& cohort) {
  return tamis_binary() + " relatedness --genotypes " + cohort + ".vcf.gz --keep-above 0.1 --threads 2 --quiet --out " +
         cohort;
}

std::string matrix_of(const std::string& cohort) { return "--relatedness " + cohort + ".relatedness.tsv.gz"; }

std::string inputs_of(const std::string& cohort, const std::string& traits_table, const std::string& covariates) {
  return " --genotypes " + cohort + ".vcf.gz --traits " + traits_table + " --trait " + kTrait + " --covariates " +
         covariates + " --quiet";
}

std::string scan_command(const std::string& cohort, const std::string& out, const std::string& extra,
                         int threads = 2) {
  return tamis_binary() + " scan" + inputs_of(cohort, cohort + ".traits.tsv", kCovariates) + " --threads " +
         std::to_string(threads) + " --out " + out + " " + extra;
}

std::string results_of(const std::string& prefix) { return prefix + "." + kTrait + ".tsv.gz"; }

std::size_t column_of(const std::string& header, const std::string& name) {
  const std::vector<std::string> names = split_fields(header);
  const auto found = std::find(names.begin(), names.end(), name);
  if (found == names.end()) throw std::runtime_error("no column " + name + " in " + header);
  return static_cast<std::size_t>(found - names.begin());
}

// The counts of the log's line "... N cases, M controls".
std::pair<std::size_t, std::size_t> case_control_counts(const std::string& log) {
  const std::size_t cases_end = log.find(" cases, ");
  if (cases_end == std::string::npos) throw std::runtime_error("no case count in the log");
  const std::size_t cases_start = log.rfind(' ', cases_end - 1) + 1;
  const std::size_t controls_start = cases_end + 8;
  return {std::stoul(log.substr(cases_start, cases_end - cases_start)), std::stoul(log.substr(controls_start))};
}

// ---------------------------------------------------------------------------
// Calibration on null family cohorts.

struct NullCohort {
  int seed;
  double prevalence;
};
// Seeds never used to tune the model: they were fixed before the mixed
// model's scans were first run.
constexpr NullCohort kNullCohorts[] = {{21, 0.03}, {22, 0.10}};

// Minor allele counts below this (among the analysis samples: the rows'
// `mac`) make the rare bin, where the saddlepoint approximation matters.
constexpr double kRareMac = 60.0;

std::string null_cohort_prefix(const std::string& dir, const NullCohort& cohort) {
  return dir + "/null" + std::to_string(cohort.seed);
}

// The score tests of one scan, split by minor allele count.
struct Tally {
  std::vector<double> chisq;
  std::size_t below_1e2 = 0;  // score_p < 0.01
  std::size_t below_1e3 = 0;  // score_p < 0.001
};
struct ScanTally {
  Tally rare;
  Tally common;
};

ScanTally tally_scan(const std::string& path) {
  const std::string text = read_gzip_file(path);
  const std::string header = text.substr(0, text.find('\n'));
  const std::size_t chisq_column = column_of(header, "score_chisq");
  const std::size_t p_column = column_of(header, "score_p");
  const std::size_t mac_column = column_of(header, "mac");
  ScanTally tally;
  for (const auto& fields : data_rows(text)) {
    Tally& bin = std::stod(fields.at(mac_column)) < kRareMac ? tally.rare : tally.common;
    bin.chisq.push_back(std::stod(fields.at(chisq_column)));
    const double p = std::stod(fields.at(p_column));
    if (p < 0.01) ++bin.below_1e2;
    if (p < 0.001) ++bin.below_1e3;
  }
  return tally;
}

struct LevelCheck {
  std::size_t plain;
  std::size_t mixed;
  std::pair<std::size_t, std::size_t> bounds;
};

// Every variant of a null cohort is null, so the count of p-values below a
// level is Binomial(variants, level), up to the correlation of neighbouring
// variants in linkage.
LevelCheck check_level(std::size_t plain, std::size_t mixed, std::size_t variants, double level) {
  return {plain, mixed, binomial_bounds(variants, level)};
}

void print_level(const char* name, const LevelCheck& check) {
  std::printf("    p < %s: plain %4zu, mixed %4zu; binomial 99.9%% bounds [%zu, %zu]%s\n", name, check.plain,
              check.mixed, check.bounds.first, check.bounds.second,
              check.plain > check.bounds.second ? "  (plain above)" : "");
}

void expect_within(const LevelCheck& check, const std::string& label) {
  EXPECT_GE(check.mixed, check.bounds.first) << label;
  EXPECT_LE(check.mixed, check.bounds.second) << label;
}

// ctest runs every test in a process of its own, so this set-up (two
// cohorts of 3,000 samples x 16,000 variants, about half of them rare, their
// relatedness matrices and four scans) serves the calibration test alone.
class BinaryMixedCalibration : public ::testing::Test {
 protected:
  // Null cohorts (no planted variant): 90% of the samples in families, a
  // polygenic component of h^2 = 0.5 on the logit liability scale from
  // loci outside the VCF, so every variant written is null and relatives
  // share the trait; one with 3% cases, one with 10%. The matrix comes from
  // `tamis relatedness` on the cohort's own markers, as an analyst makes it:
  // it holds the parent-child, sibling, half-sibling and cousin pairs at
  // their realised relatedness, where a family-intercept matrix from the
  // pedigree would call spouses and cousins as related as siblings.
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("binary_mixed_calibration");
    for (const NullCohort& null_cohort : kNullCohorts) {
      const std::string cohort = null_cohort_prefix(dir_, null_cohort);
      const std::string shape = "--samples 3000 --variants 16000 --rare-fraction 0.5 --causal 0 --families 0.9 "
                                "--heritability 0.5 --prevalence " +
                                std::to_string(null_cohort.prevalence);
      ASSERT_EQ(run_command(simulate_command(cohort, null_cohort.seed, shape)), 0);
      ASSERT_EQ(run_command(relatedness_command(cohort)), 0);
      // Score tests only: the calibration is the screen's.
      ASSERT_EQ(run_command(scan_command(cohort, cohort + "_plain", "--confirm-below 0")), 0);
      ASSERT_EQ(run_command(scan_command(cohort, cohort + "_mixed", "--confirm-below 0 " + matrix_of(cohort))), 0);
    }
  }
  static std::string dir_;
};
std::string BinaryMixedCalibration::dir_;

TEST_F(BinaryMixedCalibration, PlainLogisticScanIsInflatedAndTheMixedModelIsCalibrated) {
  for (const NullCohort& null_cohort : kNullCohorts) {
    const std::string cohort = null_cohort_prefix(dir_, null_cohort);
    const ScanTally plain = tally_scan(results_of(cohort + "_plain"));
    const ScanTally mixed = tally_scan(results_of(cohort + "_mixed"));
    const std::string log = read_text_file(cohort + "_mixed.log");
    const auto [cases, controls] = case_control_counts(log);
    std::printf("prevalence %.2f (seed %d): %zu cases, %zu controls\n", null_cohort.prevalence, null_cohort.seed,
                cases, controls);
    ASSERT_EQ(plain.rare.chisq.size(), mixed.rare.chisq.size());
    ASSERT_EQ(plain.common.chisq.size(), mixed.common.chisq.size());
    // Enough variants in each bin that 0.001 has a lower bound above 0.
    ASSERT_GT(mixed.rare.chisq.size(), 4000u);
    ASSERT_GT(mixed.common.chisq.size(), 8000u);

    for (const bool rare : {true, false}) {
      const Tally& plain_bin = rare ? plain.rare : plain.common;
      const Tally& mixed_bin = rare ? mixed.rare : mixed.common;
      const std::size_t variants = mixed_bin.chisq.size();
      const std::string label = std::string(rare ? "MAC < 60" : "MAC >= 60") + ", prevalence " +
                                std::to_string(null_cohort.prevalence);
      std::printf("  %s: %zu variants, lambda_gc plain %.3f, mixed %.3f\n", rare ? "MAC < 60 " : "MAC >= 60", variants,
                  lambda_gc(plain_bin.chisq), lambda_gc(mixed_bin.chisq));
      const LevelCheck at_1e2 = check_level(plain_bin.below_1e2, mixed_bin.below_1e2, variants, 0.01);
      const LevelCheck at_1e3 = check_level(plain_bin.below_1e3, mixed_bin.below_1e3, variants, 0.001);
      print_level("0.01 ", at_1e2);
      print_level("0.001", at_1e3);
      expect_within(at_1e2, label + ", p < 0.01");
      expect_within(at_1e3, label + ", p < 0.001");
      if (!rare) {
        const double mixed_lambda = lambda_gc(mixed_bin.chisq);
        EXPECT_GE(mixed_lambda, 0.9) << label;
        EXPECT_LE(mixed_lambda, 1.1) << label;
      }
      // The plain logistic scan treats relatives as independent: where cases
      // are common enough for relatives to share them, its excess of small
      // p-values among common variants leaves the bounds.
      if (!rare && null_cohort.prevalence >= 0.1) {
        EXPECT_GT(at_1e2.plain, at_1e2.bounds.second) << "the plain scan's excess of small p-values, " << label;
      }
    }
  }
}

// The bounds against R's own binomial quantiles, qbinom(0.0005, n, p) and
// qbinom(0.9995, n, p), from R 4.2.2 `stats` (run on the development machine).
TEST(BinomialBounds, AgreeWithRsQuantiles) {
  EXPECT_EQ(binomial_bounds(10000, 0.01), std::make_pair(std::size_t{69}, std::size_t{134}));
  EXPECT_EQ(binomial_bounds(8000, 0.01), std::make_pair(std::size_t{52}, std::size_t{111}));
  EXPECT_EQ(binomial_bounds(16000, 0.001), std::make_pair(std::size_t{5}, std::size_t{31}));
  EXPECT_EQ(binomial_bounds(5474, 0.001), std::make_pair(std::size_t{0}, std::size_t{15}));
  EXPECT_EQ(binomial_bounds(200, 0.5), std::make_pair(std::size_t{77}, std::size_t{123}));
}

// ---------------------------------------------------------------------------
// A small family cohort for the pipeline's promises.

class BinaryMixedScan : public ::testing::Test {
 protected:
  // 1,000 samples, 60% in families, h^2 = 0.6, a quarter of them cases, six
  // planted variants, so that the scan has hits to confirm.
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("binary_mixed_scan");
    ASSERT_EQ(run_command(simulate_command(cohort(), 4, "--samples 1000 --variants 2000 --families 0.6 "
                                                        "--heritability 0.6 --prevalence 0.25")),
              0);
    ASSERT_EQ(run_command(relatedness_command(cohort())), 0);
  }
  static std::string cohort() { return dir_ + "/cohort"; }
  static std::string out(const std::string& name) { return dir_ + "/" + name; }
  static std::string scan(const std::string& name, const std::string& extra, int threads = 2) {
    return scan_command(cohort(), out(name), matrix_of(cohort()) + " " + extra, threads);
  }
  static std::string results(const std::string& name) { return results_of(out(name)); }
  static std::string dir_;
};
std::string BinaryMixedScan::dir_;

// The header and the rows that a confirmation refit wrote (test other than
// the score test's).
std::string confirmed_rows(const std::string& text) {
  const std::vector<std::string> lines = lines_of(text);
  const std::size_t test_column = column_of(lines.at(0), "test");
  std::string kept = lines.at(0) + "\n";
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    if (split_fields(lines[line_idx]).at(test_column).rfind("score", 0) != 0) kept += lines[line_idx] + "\n";
  }
  return kept;
}

TEST_F(BinaryMixedScan, OneAndFourThreadsGiveIdenticalFiles) {
  ASSERT_EQ(run_command(scan("one", "--confirm-below 1e-3", 1)), 0);
  ASSERT_EQ(run_command(scan("four", "--confirm-below 1e-3", 4)), 0);
  const std::string confirmed = confirmed_rows(read_gzip_file(results("one")));
  EXPECT_GT(std::count(confirmed.begin(), confirmed.end(), '\n'), 2) << "hits were refitted";
  EXPECT_TRUE(read_text_file(results("one")) == read_text_file(results("four")));
  EXPECT_TRUE(read_text_file(results("one") + ".tbi") == read_text_file(results("four") + ".tbi"));
}

TEST_F(BinaryMixedScan, ConfirmReproducesTheScansConfirmedRows) {
  ASSERT_EQ(run_command(scan("full", "--confirm-below 1e-3")), 0);
  ASSERT_EQ(run_command(scan("screen", "--confirm-below 0")), 0);
  ASSERT_EQ(run_command(tamis_binary() + " confirm" + inputs_of(cohort(), cohort() + ".traits.tsv", kCovariates) +
                        " " + matrix_of(cohort()) + " --from-results " + results("screen") +
                        " --below 1e-3 --out " + out("refit")),
            0);
  const std::string expected = confirmed_rows(read_gzip_file(results("full")));
  EXPECT_GT(std::count(expected.begin(), expected.end(), '\n'), 2) << "hits were refitted";
  EXPECT_EQ(read_gzip_file(results("refit")), expected);
}

TEST_F(BinaryMixedScan, ShardsMergeToTheWholeScan) {
  ASSERT_EQ(run_command(scan("whole", "")), 0);
  for (const std::string shard : {"1", "2"}) {
    ASSERT_EQ(run_command(scan("shard" + shard, "--shard " + shard + "/2")), 0);
  }
  ASSERT_EQ(run_command(tamis_binary() + " merge --out " + out("merged") + " " + out("shard1") + " " + out("shard2") +
                        " 2>/dev/null"),
            0);
  EXPECT_TRUE(read_gzip_file(results("whole")) == read_gzip_file(results("merged")));
}

TEST_F(BinaryMixedScan, ResumeAfterAKillGivesTheWholeScan) {
  // 2,000 records of 1,000 samples come in blocks of 128: 16 blocks, a
  // checkpoint every 2, so the kill after block 9 falls between two.
  const std::string options = "--checkpoint-blocks 2";
  ASSERT_EQ(run_command(scan("whole", options)), 0);
  EXPECT_EQ(run_command("TAMIS_TEST_SIGNAL_AFTER_BLOCK=9:KILL " + scan("killed", options) + " 2>/dev/null"), 137)
      << "128 + SIGKILL (9), as the shell reports it";
  EXPECT_FALSE(file_exists(results("killed")));
  ASSERT_EQ(run_command(scan("killed", options + " --resume")), 0);
  EXPECT_TRUE(read_text_file(results("whole")) == read_text_file(results("killed")));
  EXPECT_TRUE(read_text_file(results("whole") + ".tbi") == read_text_file(results("killed") + ".tbi"));
}

// The cohort's table, each row marked if it is an analysis sample of
// winter_wheeze with the covariates age and sex: in the genotype files, with
// the trait, age and sex all present.
struct CohortTable {
  std::string header;
  std::size_t trait_column = 0;
  std::vector<std::vector<std::string>> rows;
  std::vector<bool> analysed;
};

CohortTable read_cohort_table(const std::string& cohort) {
  const std::string vcf = read_gzip_file(cohort + ".vcf.gz");
  const std::size_t header_start = vcf.find("#CHROM");
  const std::vector<std::string> vcf_columns =
      split_fields(vcf.substr(header_start, vcf.find('\n', header_start) - header_start));
  const std::vector<std::string> genotyped(vcf_columns.begin() + 9, vcf_columns.end());

  const std::vector<std::string> lines = lines_of(read_text_file(cohort + ".traits.tsv"));
  CohortTable table;
  table.header = lines.at(0);
  table.trait_column = column_of(table.header, kTrait);
  const std::size_t age_column = column_of(table.header, "age");
  const std::size_t sex_column = column_of(table.header, "sex");
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    std::vector<std::string> fields = split_fields(lines[line_idx]);
    table.analysed.push_back(fields.at(table.trait_column) != "NA" && fields.at(age_column) != "NA" &&
                             fields.at(sex_column) != "NA" &&
                             std::find(genotyped.begin(), genotyped.end(), fields.at(0)) != genotyped.end());
    table.rows.push_back(std::move(fields));
  }
  return table;
}

void write_cohort_table(const CohortTable& table, const std::string& path) {
  std::string text = table.header + "\n";
  for (const auto& fields : table.rows) {
    for (std::size_t field_idx = 0; field_idx < fields.size(); ++field_idx) {
      text += (field_idx ? "\t" : "") + fields[field_idx];
    }
    text += "\n";
  }
  write_text_file(path, text);
}

TEST_F(BinaryMixedScan, TooFewCasesOrControlsAreRefusedNamingTheCounts) {
  const CohortTable original = read_cohort_table(cohort());
  const std::size_t analysed =
      static_cast<std::size_t>(std::count(original.analysed.begin(), original.analysed.end(), true));
  for (const std::string rare_value : {"1", "0"}) {
    // Only the first 8 analysis samples keep `rare_value`; every other
    // non-missing value becomes the other one, so the analysis samples stay.
    CohortTable table = original;
    std::size_t given = 0;
    for (std::size_t row_idx = 0; row_idx < table.rows.size(); ++row_idx) {
      std::string& value = table.rows[row_idx].at(table.trait_column);
      if (value == "NA") continue;
      const bool rare = table.analysed[row_idx] && given < 8;
      value = rare == (rare_value == "1") ? "1" : "0";
      given += rare;
    }
    const std::string path = out("few" + rare_value + ".tsv");
    write_cohort_table(table, path);
    int code = 0;
    const std::string message = capture_command(
        tamis_binary() + " scan" + inputs_of(cohort(), path, "age,sex") + " " + matrix_of(cohort()) + " --out " +
            out("few" + rare_value) + " 2>&1",
        &code);
    const std::size_t cases = rare_value == "1" ? 8 : analysed - 8;
    EXPECT_NE(code, 0) << message;
    EXPECT_NE(message.find(" " + std::to_string(cases) + " cases"), std::string::npos) << message;
    EXPECT_NE(message.find(" " + std::to_string(analysed - cases) + " controls"), std::string::npos) << message;
    EXPECT_FALSE(file_exists(results("few" + rare_value)));
  }
}

TEST_F(BinaryMixedScan, LogAndSidecarReportTheNullFit) {
  ASSERT_EQ(run_command(scan("logged", "--confirm-below 1e-3")), 0);
  const std::string log = read_text_file(out("logged") + ".log");
  EXPECT_NE(log.find("null model winter_wheeze: logistic mixed model by penalised quasi-likelihood, tau = "),
            std::string::npos)
      << log;
  EXPECT_NE(log.find("  Laplace null fit: tau = "), std::string::npos) << log;
  EXPECT_NE(log.find("related groups (largest "), std::string::npos) << log;
  const std::string sidecar = read_text_file(results("logged") + "-meta.yaml");
  EXPECT_NE(sidecar.find("tamis_relatedness: cohort.relatedness.tsv.gz md5 "), std::string::npos) << sidecar;
  EXPECT_NE(sidecar.find("tamis_null_model: logistic mixed model by penalised quasi-likelihood, tau "),
            std::string::npos)
      << sidecar;
}

TEST_F(BinaryMixedScan, CasesAllInOneRelatedGroupAreWarnedAbout) {
  // A matrix that chains every case among the analysis samples to the next
  // (relatedness 0.5: a tridiagonal A with eigenvalues 1 + cos(k pi / (m + 1)),
  // all positive) and leaves the controls unrelated.
  const CohortTable table = read_cohort_table(cohort());
  std::vector<std::string> cases;
  for (std::size_t row_idx = 0; row_idx < table.rows.size(); ++row_idx) {
    if (table.analysed[row_idx] && table.rows[row_idx].at(table.trait_column) == "1") {
      cases.push_back(table.rows[row_idx].at(0));
    }
  }
  std::string chain = "sample_1\tsample_2\trelatedness\n";
  for (std::size_t case_idx = 1; case_idx < cases.size(); ++case_idx) {
    chain += cases[case_idx - 1] + "\t" + cases[case_idx] + "\t0.5\n";
  }
  write_text_file(out("chain.tsv"), chain);
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs_of(cohort(), cohort() + ".traits.tsv", "age,sex") +
                        " --relatedness " + out("chain.tsv") + " --confirm-below 0 --out " + out("chained")),
            0);
  const std::string log = read_text_file(out("chained") + ".log");
  EXPECT_NE(log.find("warning: trait winter_wheeze: all " + std::to_string(cases.size()) +
                     " cases are in one related group of " + std::to_string(cases.size()) + " samples"),
            std::string::npos)
      << log;
}

}  // namespace
}  // namespace tamis::testing
