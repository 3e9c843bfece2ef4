// scan and confirm --interaction-with, end to end: the same bytes at 1 and
// 4 threads, the seven interaction columns, confirm refitting as the scan does,
// and the options refused. The statistics themselves are checked against R
// in test_interaction.cpp and reference_r_interaction.
#include <gtest/gtest.h>

#include <algorithm>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

class InteractionScan : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("interaction_scan");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 600 --variants 800 --seed 1818 2>/dev/null"),
              0);
  }
  static std::string inputs() {
    return " --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,pc1,pc2 --quiet";
  }
  static std::string dir_;
};
std::string InteractionScan::dir_;

std::vector<std::string> tests_of(const std::string& text) {
  std::vector<std::string> tests;
  for (const auto& row : data_rows(text)) tests.push_back(row.at(13));
  return tests;
}

TEST_F(InteractionScan, SameBytesAtOneAndFourThreadsWithTheInteractionColumns) {
  for (const std::string exposure : {"village", "pc1"}) {
    for (const int threads : {1, 4}) {
      ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + " --interaction-with " + exposure +
                            " --robust-errors hc3 --confirm-below 0.01 --threads " + std::to_string(threads) +
                            " --out " + dir_ + "/" + exposure + std::to_string(threads)),
                0);
    }
    for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
      const std::string one = read_gzip_file(dir_ + "/" + exposure + "1." + trait + ".tsv.gz");
      EXPECT_EQ(one, read_gzip_file(dir_ + "/" + exposure + "4." + trait + ".tsv.gz")) << exposure << " " << trait;
      const std::vector<std::string> header = split_fields(lines_of(one).at(0));
      const std::vector<std::string> extra(header.end() - 7, header.end());
      EXPECT_EQ(extra, (std::vector<std::string>{"main_beta", "main_standard_error", "joint_p", "joint_model_p",
                                                 "joint_lrt_p", "interaction_model_p", "interaction_df"}));
      const std::vector<std::string> tests = tests_of(one);
      EXPECT_GT(std::count(tests.begin(), tests.end(), "interaction_score"), 500) << exposure << " " << trait;
      EXPECT_GT(std::count(tests.begin(), tests.end(), "interaction_wald_hc3"), 0) << exposure << " " << trait;
      // A text exposure with three levels: 2 df; a numeric one: 1.
      for (const auto& row : data_rows(one)) {
        ASSERT_EQ(row.size(), header.size());
        ASSERT_EQ(row.back(), exposure == "village" ? "2" : "1");
      }
    }
    const std::string log = read_text_file(dir_ + "/" + exposure + "1.log");
    EXPECT_NE(log.find("interaction with"), std::string::npos);
    EXPECT_NE(log.find("hc3 sandwich variances"), std::string::npos);
  }
}

TEST_F(InteractionScan, ConfirmRefitsTheChosenVariantsAsTheScanDoes) {
  const std::string options = " --interaction-with village";
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + options + " --confirm-below 0.02 --out " + dir_ + "/full"),
            0);
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + options + " --confirm-below 0 --out " + dir_ + "/screen"),
            0);
  ASSERT_EQ(run_command(tamis_binary() + " confirm" + inputs() + options + " --from-results " + dir_ +
                        "/screen.fev1_litres.tsv.gz " + dir_ + "/screen.winter_wheeze.tsv.gz --below 0.02 --out " +
                        dir_ + "/refit"),
            0);
  for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
    const std::vector<std::string> full = lines_of(read_gzip_file(dir_ + "/full." + trait + ".tsv.gz"));
    std::vector<std::string> expected = {full.at(0)};
    for (std::size_t line = 1; line < full.size(); ++line) {
      if (split_fields(full[line]).at(13) != "interaction_score") expected.push_back(full[line]);
    }
    EXPECT_GT(expected.size(), 3u) << trait;
    EXPECT_EQ(lines_of(read_gzip_file(dir_ + "/refit." + trait + ".tsv.gz")), expected) << trait;
  }
}

TEST_F(InteractionScan, ShardsMergeToTheWholeScan) {
  const std::string options = " --interaction-with pc1 --confirm-below 0.01 --threads 2";
  ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + options + " --out " + dir_ + "/whole"), 0);
  for (const std::string shard : {"1", "2"}) {
    ASSERT_EQ(run_command(tamis_binary() + " scan" + inputs() + options + " --shard " + shard + "/2 --out " + dir_ +
                          "/shard" + shard),
              0);
  }
  ASSERT_EQ(run_command(tamis_binary() + " merge --out " + dir_ + "/merged " + dir_ + "/shard1 " + dir_ +
                        "/shard2 2>/dev/null"),
            0);
  for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
    EXPECT_EQ(read_gzip_file(dir_ + "/whole." + trait + ".tsv.gz"), read_gzip_file(dir_ + "/merged." + trait + ".tsv.gz"))
        << trait;
  }
}

TEST_F(InteractionScan, RefusesWhatItCannotDo) {
  const std::string scan = tamis_binary() + " scan" + inputs() + " --out " + dir_ + "/refused";
  int status = 0;
  std::string output = capture_command(scan + " --interaction-with village --robust-errors hc9 2>&1", &status);
  EXPECT_NE(status, 0);
  EXPECT_NE(output.find("--robust-errors"), std::string::npos) << output;
  output = capture_command(scan + " --interaction-with village --relatedness " + dir_ + "/cohort.traits.tsv 2>&1",
                           &status);
  EXPECT_NE(status, 0);
  EXPECT_NE(output.find("--relatedness"), std::string::npos) << output;
  output = capture_command(scan + " --interaction-with hours_outdoors 2>&1", &status);
  EXPECT_NE(status, 0);
  EXPECT_NE(output.find("hours_outdoors"), std::string::npos) << output;
  EXPECT_FALSE(file_exists(dir_ + "/refused.fev1_litres.tsv.gz"));
  output = capture_command(tamis_binary() + " signals" + inputs() + " --region 1 --interaction-with village --out " +
                               dir_ + "/refused_signals 2>&1",
                           &status);
  EXPECT_NE(status, 0);
  EXPECT_NE(output.find("--interaction-with"), std::string::npos) << output;
}

}  // namespace
}  // namespace tamis::testing
