// `tamis merge` of set results (scan --sets): the parts' PREFIX.TRAIT.sets.tsv.gz
// joined in shard order under one header with a fresh tabix index, rows
// checked to stay sorted, and parts with and without set results refused.
// The parts are written by hand here, as a sharded scan would leave them.
#include <gtest/gtest.h>

#include <cmath>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/merge.hpp"
#include "tamis/results_writer.hpp"

namespace tamis::testing {
namespace {

constexpr int shard_count = 2;

struct SetPlace {
  std::string name, chromosome;
  std::int64_t start, end;
};

tamis::SetResultRow make_set_row(const SetPlace& place) {
  tamis::SetResultRow row;
  row.set = place.name;
  row.chromosome = place.chromosome;
  row.start = place.start;
  row.end = place.end;
  row.n_variants = 7;
  row.total_mac = 19;
  row.burden_log_p = row.variance_log_p = row.optimal_log_p = row.cauchy_log_p = row.overall_log_p = std::log(0.2);
  row.burden_test = "score";
  row.variance_method = "davies";
  row.top_variant = place.name + "_v1";
  row.top_variant_log_p = std::log(0.05);
  row.weights = "beta_1_25";
  row.n = 500;
  return row;
}

// One part: a trait's results (one row at `position`) with the sidecar of
// shard `shard` covering `range`, and set results when `sets` is given.
void write_part(const std::string& prefix, int shard, const std::string& range, std::int64_t position,
                const std::vector<SetPlace>* sets) {
  const std::string results = prefix + ".fev1_litres.tsv.gz";
  {
    tamis::BgzfTextFile file(results);
    tamis::ResultRow row;
    row.chromosome = "1";
    row.position = position;
    row.effect_allele = "A";
    row.other_allele = "G";
    row.variant_id = "v" + std::to_string(position);
    row.test = "score";
    row.n = 500;
    std::string text = tamis::result_header_line();
    tamis::append_result_row(row, text);
    file.write(text);
    file.commit(tamis::IndexKind::tabix_results);
  }
  tamis::SidecarFields fields;
  fields.trait_description = "fev1_litres";
  fields.sample_size = 500;
  fields.extra = {{tamis::kShardKey, std::to_string(shard) + "/" + std::to_string(shard_count)},
                  {tamis::kShardRangesKey, range},
                  {tamis::kFingerprintKey, "5a17ad5e"}};
  tamis::write_metadata_sidecar(results, fields);
  if (sets == nullptr) return;
  tamis::BgzfTextFile file(prefix + ".fev1_litres.sets.tsv.gz");
  std::string text = tamis::set_result_header_line();
  for (const SetPlace& place : *sets) tamis::append_set_result_row(make_set_row(place), text);
  file.write(text);
  file.commit(tamis::IndexKind::tabix_sets);
}

class MergeSets : public ::testing::Test {
 protected:
  void SetUp() override { dir_ = make_temp_dir("merge_sets"); }
  // Two parts split at 1:500000; part 2 owns the rest of chromosome 1 and chromosome 2.
  void write_parts(const std::vector<SetPlace>* first, const std::vector<SetPlace>* second) {
    write_part(dir_ + "/p1", 1, "1:1-500000", 1000, first);
    write_part(dir_ + "/p2", 2, "1:500001-9223372036854775807;2:1-9223372036854775807", 600000, second);
  }
  tamis::MergeOptions options() const { return tamis::MergeOptions{dir_ + "/merged", {dir_ + "/p2", dir_ + "/p1"}}; }
  std::string dir_;
};

TEST_F(MergeSets, JoinedInShardOrderWithOneHeaderAndAFreshIndex) {
  const std::vector<SetPlace> first = {{"SRG0001", "1", 900, 4000}, {"SRG0002", "1", 3000, 9000}};
  const std::vector<SetPlace> second = {{"SRG0003", "1", 700000, 720000}, {"SRG0004", "2", 5000, 6000}};
  write_parts(&first, &second);
  const tamis::MergeSummary summary = tamis::merge_shards(options());  // parts given out of order

  const std::string merged = dir_ + "/merged.fev1_litres.sets.tsv.gz";
  EXPECT_EQ(summary.result_files,
            (std::vector<std::string>{dir_ + "/merged.fev1_litres.tsv.gz", merged}));
  std::string expected = tamis::set_result_header_line();
  for (const auto* part : {&first, &second}) {
    for (const SetPlace& place : *part) tamis::append_set_result_row(make_set_row(place), expected);
  }
  EXPECT_EQ(read_gzip_file(merged), expected);
  EXPECT_FALSE(file_exists(merged + ".partial"));

  // The index answers region queries over the sets' extents: tabix 1.16
  // (Debian tabix), columns 2-4 as the scan indexes them.
  ASSERT_TRUE(file_exists(merged + ".tbi"));
  int code = -1;
  const std::vector<std::string> overlapping = lines_of(capture_command("tabix " + merged + " 1:3500-3600", &code));
  EXPECT_EQ(code, 0);
  ASSERT_EQ(overlapping.size(), 2u);
  EXPECT_EQ(split_fields(overlapping[0])[0], "SRG0001");
  EXPECT_EQ(split_fields(overlapping[1])[0], "SRG0002");
  const std::vector<std::string> second_contig = lines_of(capture_command("tabix " + merged + " 2", &code));
  ASSERT_EQ(second_contig.size(), 1u);
  EXPECT_EQ(split_fields(second_contig[0])[0], "SRG0004");
}

TEST_F(MergeSets, APartWithoutSetsIsNamed) {
  const std::vector<SetPlace> first = {{"SRG0001", "1", 900, 4000}};
  write_parts(&first, nullptr);
  try {
    tamis::merge_shards(options());
    FAIL() << "expected a refusal";
  } catch (const tamis::Error& error) {
    const std::string message = error.what();
    EXPECT_EQ(error.code(), tamis::ExitCode::usage);
    EXPECT_EQ(message.rfind(dir_ + "/p2", 0), 0u) << message;
    EXPECT_NE(message.find("p2.fev1_litres.sets.tsv.gz"), std::string::npos) << message;
  }
  EXPECT_FALSE(file_exists(dir_ + "/merged.fev1_litres.tsv.gz"));
}

TEST_F(MergeSets, OutOfOrderRowsAreRefusedAndNothingIsWritten) {
  // A set of part 2 starting before part 1's last set on the same chromosome.
  const std::vector<SetPlace> first = {{"SRG0001", "1", 900, 4000}, {"SRG0002", "1", 3000, 9000}};
  const std::vector<SetPlace> second = {{"SRG0009", "1", 2000, 2500}};
  write_parts(&first, &second);
  try {
    tamis::merge_shards(options());
    FAIL() << "expected a refusal";
  } catch (const tamis::Error& error) {
    const std::string message = error.what();
    EXPECT_EQ(error.code(), tamis::ExitCode::results_input);
    EXPECT_NE(message.find(dir_ + "/p2.fev1_litres.sets.tsv.gz, line 2"), std::string::npos) << message;
    EXPECT_NE(message.find("out of order"), std::string::npos) << message;
    EXPECT_NE(message.find("1:3000"), std::string::npos) << "the row it follows: " << message;
  }
  for (const char* suffix : {".fev1_litres.sets.tsv.gz", ".fev1_litres.sets.tsv.gz.partial", ".fev1_litres.tsv.gz"}) {
    EXPECT_FALSE(file_exists(dir_ + "/merged" + suffix)) << suffix;
  }
}

TEST_F(MergeSets, AChromosomeMetAgainIsOutOfOrder) {
  const std::vector<SetPlace> first = {{"SRG0001", "1", 900, 4000}, {"SRG0002", "2", 100, 900}};
  const std::vector<SetPlace> second = {{"SRG0003", "1", 700000, 720000}};
  write_parts(&first, &second);
  EXPECT_THROW(tamis::merge_shards(options()), tamis::Error);
}

TEST_F(MergeSets, AShardWithoutSetsOfItsOwnKeepsTheHeaderOnly) {
  const std::vector<SetPlace> first;
  const std::vector<SetPlace> second = {{"SRG0003", "1", 700000, 720000}};
  write_parts(&first, &second);
  tamis::merge_shards(options());
  std::string expected = tamis::set_result_header_line();
  tamis::append_set_result_row(make_set_row(second[0]), expected);
  EXPECT_EQ(read_gzip_file(dir_ + "/merged.fev1_litres.sets.tsv.gz"), expected);
}

TEST_F(MergeSets, PartsWithoutSetsMergeAsBefore) {
  write_parts(nullptr, nullptr);
  const tamis::MergeSummary summary = tamis::merge_shards(options());
  EXPECT_EQ(summary.result_files, (std::vector<std::string>{dir_ + "/merged.fev1_litres.tsv.gz"}));
  EXPECT_FALSE(file_exists(dir_ + "/merged.fev1_litres.sets.tsv.gz"));
}

}  // namespace
}  // namespace tamis::testing
