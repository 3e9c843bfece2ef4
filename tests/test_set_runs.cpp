// Set tests across the ways a scan is run: shards merged, a killed scan
// resumed, and set hits confirmed, each giving the set rows of one whole
// uninterrupted scan.
#include <gtest/gtest.h>

#include <set>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

class SetRuns : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("set_runs");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 1000 --variants 4000 --rare-fraction 0.8 --causal-genes 3 --seed 17 "
                          "2>/dev/null"),
              0);
    ASSERT_EQ(run_command(scan_command(dir_ + "/whole")), 0);
  }
  static std::string scan_command(const std::string& prefix, const std::string& extra = "") {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,pc1,pc2 --threads 2 "
           "--quiet --checkpoint-blocks 2 --sets " +
           dir_ + "/cohort.genes.bed --set-maf-ceiling 0.05 --out " + prefix + " " + extra;
  }
  static std::string set_file(const std::string& prefix, const std::string& trait) {
    return prefix + "." + trait + ".sets.tsv.gz";
  }
  static void expect_same_set_files(const std::string& prefix) {
    for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
      EXPECT_TRUE(read_gzip_file(set_file(dir_ + "/whole", trait)) == read_gzip_file(set_file(prefix, trait)))
          << prefix << " " << trait;
      EXPECT_TRUE(file_exists(set_file(prefix, trait) + ".tbi"));
      EXPECT_TRUE(read_gzip_file(dir_ + "/whole." + trait + ".tsv.gz") ==
                  read_gzip_file(prefix + "." + trait + ".tsv.gz"))
          << prefix << " " << trait;
    }
  }
  static std::string dir_;
};
std::string SetRuns::dir_;

TEST_F(SetRuns, TheWholeScanTestsEveryGene) {
  const std::vector<std::vector<std::string>> rows = data_rows(read_gzip_file(set_file(dir_ + "/whole", "fev1_litres")));
  const std::vector<std::string> genes = lines_of(read_text_file(dir_ + "/cohort.genes.bed"));
  EXPECT_GT(rows.size(), genes.size() * 9 / 10) << "nearly every simulated gene holds a variant below 5%";
}

TEST_F(SetRuns, MergedShardsGiveTheWholeScansSetRows) {
  for (int count : {2, 5}) {
    const std::string name = dir_ + "/sharded" + std::to_string(count);
    std::string parts;
    for (int shard = 1; shard <= count; ++shard) {
      const std::string part = name + "_part" + std::to_string(shard);
      ASSERT_EQ(run_command(scan_command(part, "--shard " + std::to_string(shard) + "/" + std::to_string(count))), 0);
      parts += " " + part;
    }
    ASSERT_EQ(run_command(tamis_binary() + " merge --out " + name + parts + " 2>/dev/null"), 0);
    // Each shard's cuts are moved out of the genes, so every gene is tested
    // whole by one shard: the merged rows are the whole scan's, byte for byte.
    expect_same_set_files(name);
  }
}

TEST_F(SetRuns, KilledScansResumeToTheWholeScansSetRows) {
  // 4000 records in blocks of 128 make 32 blocks; checkpoints every 2.
  for (int blocks : {3, 16, 31}) {
    const std::string prefix = dir_ + "/killed" + std::to_string(blocks);
    EXPECT_EQ(run_command("TAMIS_TEST_SIGNAL_AFTER_BLOCK=" + std::to_string(blocks) + ":KILL " + scan_command(prefix) +
                          " 2>/dev/null"),
              137)
        << "128 + SIGKILL (9), as the shell reports it";
    EXPECT_FALSE(file_exists(set_file(prefix, "fev1_litres"))) << "a killed run leaves no final set file";
    ASSERT_EQ(run_command(scan_command(prefix, "--resume")), 0);
    expect_same_set_files(prefix);
    EXPECT_FALSE(file_exists(prefix + ".resume-sets")) << "the saved sets go with the checkpoint";
  }
}

TEST_F(SetRuns, ConfirmingSetHitsTestsThoseSetsAgainAndRefitsTheirVariants) {
  const std::string whole = set_file(dir_ + "/whole", "fev1_litres");
  const std::string prefix = dir_ + "/confirmed";
  ASSERT_EQ(run_command(tamis_binary() + " confirm --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
                        "/cohort.traits.tsv --trait fev1_litres --covariates age,sex,pc1,pc2 --threads 2 --quiet "
                        "--sets " + dir_ + "/cohort.genes.bed --set-maf-ceiling 0.05 --from-results " + whole +
                        " --below 0.01 --out " + prefix),
            0);
  std::set<std::string> hits;
  for (const std::vector<std::string>& row : data_rows(read_gzip_file(whole))) {
    if (std::stod(row[11]) > 2.0) hits.insert(row[0]);  // neg_log_10_overall_p above 2
  }
  ASSERT_FALSE(hits.empty()) << "the planted genes give hits";
  std::set<std::string> confirmed;
  for (const std::vector<std::string>& row : data_rows(read_gzip_file(set_file(prefix, "fev1_litres")))) {
    confirmed.insert(row[0]);
    for (const std::vector<std::string>& original : data_rows(read_gzip_file(whole))) {
      if (original[0] == row[0]) {
        EXPECT_EQ(original, row) << "the set is tested again with every variant";
      }
    }
  }
  EXPECT_EQ(confirmed, hits);
  const std::vector<std::vector<std::string>> variants = data_rows(read_gzip_file(prefix + ".fev1_litres.tsv.gz"));
  ASSERT_FALSE(variants.empty());
  for (const std::vector<std::string>& row : variants) EXPECT_EQ(row[13], "lrt") << "every variant refitted";
}

TEST_F(SetRuns, ConfirmWithSetsNeedsSetResults) {
  int code = 0;
  const std::string message = capture_command(
      tamis_binary() + " confirm --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
          "/cohort.traits.tsv --trait fev1_litres --sets " + dir_ + "/cohort.genes.bed --from-results " + dir_ +
          "/whole.fev1_litres.tsv.gz --below 0.5 --out " + dir_ + "/refused 2>&1",
      &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(message.find("set results"), std::string::npos) << message;
}

}  // namespace
}  // namespace tamis::testing
