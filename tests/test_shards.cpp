// Sharded scans: shards 1..N merged equal the whole run, and merge refuses
// part sets that cannot make a whole run.
#include <gtest/gtest.h>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

class Shards : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("shards");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 400 --variants 1200 --chromosomes 3 --seed 17 2>/dev/null"),
              0);
    ASSERT_EQ(run_command(scan(dir_ + "/whole")), 0);
  }
  static std::string scan(const std::string& prefix, const std::string& extra = "") {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates age,sex,pc1 --threads 2 --quiet" +
           " --out " + prefix + " " + extra;
  }
  static void run_shards(const std::string& name, int count, const std::string& extra = "") {
    for (int shard = 1; shard <= count; ++shard) {
      ASSERT_EQ(run_command(scan(part(name, shard), "--shard " + std::to_string(shard) + "/" +
                                                        std::to_string(count) + " " + extra)),
                0);
    }
  }
  static std::string part(const std::string& name, int shard) {
    return dir_ + "/" + name + "_part" + std::to_string(shard);
  }
  static std::string merge(const std::string& out, const std::vector<std::string>& parts, int* code) {
    std::string command = tamis_binary() + " merge --out " + out;
    for (const std::string& prefix : parts) command += " " + prefix;
    return capture_command(command + " 2>&1", code);
  }
  static std::string dir_;
};
std::string Shards::dir_;

TEST_F(Shards, MergedShardsEqualTheWholeRun) {
  // 1, 2 and 3 shards, and 7 shards: more shards than the 3 contigs.
  for (int count : {1, 2, 3, 7}) {
    const std::string name = "n" + std::to_string(count);
    run_shards(name, count);
    std::vector<std::string> parts;
    for (int shard = count; shard >= 1; --shard) parts.push_back(part(name, shard));  // any order
    int code = 0;
    const std::string output = merge(dir_ + "/" + name + "_merged", parts, &code);
    ASSERT_EQ(code, 0) << output;
    for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
      EXPECT_EQ(read_gzip_file(dir_ + "/whole." + trait + ".tsv.gz"),
                read_gzip_file(dir_ + "/" + name + "_merged." + trait + ".tsv.gz"))
          << count << " shards, " << trait;
      EXPECT_TRUE(file_exists(dir_ + "/" + name + "_merged." + trait + ".tsv.gz.tbi"));
    }
    const std::string yaml = read_text_file(dir_ + "/" + name + "_merged.fev1_litres.tsv.gz-meta.yaml");
    const std::string md5 = capture_command("md5sum " + dir_ + "/" + name + "_merged.fev1_litres.tsv.gz");
    EXPECT_NE(yaml.find(md5.substr(0, 32)), std::string::npos) << "new md5 (coreutils md5sum) in the sidecar";
    EXPECT_EQ(yaml.find("tamis_shard:"), std::string::npos);
  }
}

TEST_F(Shards, MergeRefusesAMissingShard) {
  run_shards("missing", 3);
  int code = 0;
  const std::string output = merge(dir_ + "/missing_merged", {part("missing", 1), part("missing", 3)}, &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(output.find("shards 2 of 3 are missing"), std::string::npos) << output;
  EXPECT_FALSE(file_exists(dir_ + "/missing_merged.fev1_litres.tsv.gz"));
}

TEST_F(Shards, MergeRefusesAShardGivenTwice) {
  run_shards("twice", 2);
  int code = 0;
  const std::string output =
      merge(dir_ + "/twice_merged", {part("twice", 1), part("twice", 2), part("twice", 2)}, &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(output.find("given twice"), std::string::npos) << output;
}

TEST_F(Shards, MergeRefusesPartsOfDifferentRuns) {
  run_shards("run_a", 2);
  run_shards("run_b", 2, "--confirm-below 0.01");
  int code = 0;
  const std::string output = merge(dir_ + "/mixed_merged", {part("run_a", 1), part("run_b", 2)}, &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(output.find("different run"), std::string::npos) << output;
}

TEST_F(Shards, MergeRefusesOverlappingParts) {
  run_shards("overlap", 2);
  // A part whose recorded range was widened into its neighbour's.
  const std::string sidecar = part("overlap", 2) + ".fev1_litres.tsv.gz-meta.yaml";
  std::string text = read_text_file(sidecar);
  const std::size_t ranges = text.find("tamis_shard_ranges: ");
  ASSERT_NE(ranges, std::string::npos);
  const std::size_t value = ranges + std::string("tamis_shard_ranges: ").size();
  text.replace(value, text.find('\n', value) - value, "1:1-9223372036854775807");
  write_text_file(sidecar, text);
  int code = 0;
  const std::string output = merge(dir_ + "/overlap_merged", {part("overlap", 1), part("overlap", 2)}, &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(output.find("overlaps"), std::string::npos) << output;
}

TEST_F(Shards, MergeRefusesAPartThatIsNotAShard) {
  int code = 0;
  const std::string output = merge(dir_ + "/plain_merged", {dir_ + "/whole"}, &code);
  EXPECT_EQ(code, 2);
  EXPECT_NE(output.find("not scanned as a shard"), std::string::npos) << output;
}

}  // namespace
}  // namespace tamis::testing
