// Sample and variant selection in a scan: --keep-samples / --drop-samples,
// --region, --variants, and traits scanned together or alone.
#include <gtest/gtest.h>

#include <algorithm>
#include <map>
#include <sstream>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

class Selection : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("selection");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 600 --variants 900 --seed 8 2>/dev/null"),
              0);
    ASSERT_EQ(run_command(scan("whole", "--trait fev1_litres --trait winter_wheeze")), 0);
  }
  static std::string scan(const std::string& name, const std::string& extra) {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --covariates age,sex,pc1 --quiet --threads 2 --out " + dir_ + "/" + name + " " + extra;
  }
  static std::string results(const std::string& name, const std::string& trait) {
    return read_gzip_file(dir_ + "/" + name + "." + trait + ".tsv.gz");
  }
  static std::string dir_;
};
std::string Selection::dir_;

TEST_F(Selection, DroppingSamplesLowersNByExactlyThatMany) {
  // SR00001..SR00005 are genotyped and, in this cohort, analysis samples of fev1_litres
  // unless the table left them without a value; the log says how many were left out.
  write_text_file(dir_ + "/drop.txt", "SR00001\nSR00002\nSR00003\nSR00004\nSR00005\nNOT_A_SAMPLE\n");
  ASSERT_EQ(run_command(scan("dropped", "--trait fev1_litres --drop-samples " + dir_ + "/drop.txt")), 0);
  const std::string log = read_text_file(dir_ + "/dropped.log");
  const std::size_t at = log.find(" left out by --keep-samples/--drop-samples");
  ASSERT_NE(at, std::string::npos) << log;
  const std::size_t start = log.rfind(", ", at) + 2;
  const long excluded = std::stol(log.substr(start, at - start));
  EXPECT_GE(excluded, 1);
  const long n_whole = std::stol(data_rows(results("whole", "fev1_litres")).at(0).at(10));
  const long n_dropped = std::stol(data_rows(results("dropped", "fev1_litres")).at(0).at(10));
  EXPECT_EQ(n_whole - n_dropped, excluded);
  EXPECT_NE(log.find("1 of the 6 IDs in --drop-samples are not in the genotype files (NOT_A_SAMPLE)"),
            std::string::npos)
      << log;
}

TEST_F(Selection, KeepingSamplesKeepsOnlyThose) {
  std::string keep;
  for (int sample = 1; sample <= 300; ++sample) {
    char id[16];
    std::snprintf(id, sizeof id, "SR%05d\n", sample);
    keep += id;
  }
  write_text_file(dir_ + "/keep.txt", keep);
  ASSERT_EQ(run_command(scan("kept", "--trait fev1_litres --keep-samples " + dir_ + "/keep.txt")), 0);
  const long n_kept = std::stol(data_rows(results("kept", "fev1_litres")).at(0).at(10));
  EXPECT_LE(n_kept, 300);
  EXPECT_GT(n_kept, 250);
}

TEST_F(Selection, RegionSelectsExactlyItsRecords) {
  ASSERT_EQ(run_command(scan("region", "--trait fev1_litres --region 2:500000-3000000 --region 3:1-800000")), 0);
  std::string expected;
  for (const auto& row : data_rows(results("whole", "fev1_litres"))) {
    const long long position = std::stoll(row[1]);
    const bool inside = (row[0] == "2" && position >= 500000 && position <= 3000000) ||
                        (row[0] == "3" && position <= 800000);
    if (!inside) continue;
    for (std::size_t field_idx = 0; field_idx < row.size(); ++field_idx) expected += (field_idx ? "\t" : "") + row[field_idx];
    expected += "\n";
  }
  const std::string text = results("region", "fev1_litres");
  ASSERT_FALSE(expected.empty());
  EXPECT_EQ(text.substr(text.find('\n') + 1), expected);
}

TEST_F(Selection, VariantListSelectsExactlyThoseVariants) {
  const auto whole = data_rows(results("whole", "fev1_litres"));
  const auto& by_position = whole.at(10);
  // A second variant is listed by its VCF ID (simulated IDs are invented, not rsIDs,
  // so they are looked up in the VCF rather than in the results' rsid column).
  std::map<std::string, std::string> id_at_position;
  for (const std::string& line : lines_of(read_gzip_file(dir_ + "/cohort.vcf.gz"))) {
    if (line.empty() || line[0] == '#') continue;
    const auto fields = split_fields(line);
    if (fields.at(2) != "." && fields.at(4).find(',') == std::string::npos) {
      id_at_position[fields[0] + ":" + fields[1]] = fields[2];
    }
  }
  std::string by_id, by_id_variant;
  for (std::size_t row_idx = 20; row_idx < whole.size() && by_id.empty(); ++row_idx) {
    const auto found = id_at_position.find(whole[row_idx][0] + ":" + whole[row_idx][1]);
    if (found == id_at_position.end()) continue;
    by_id = found->second;
    by_id_variant = whole[row_idx][8];
  }
  ASSERT_FALSE(by_id.empty());
  write_text_file(dir_ + "/variants.txt", by_position[0] + ":" + by_position[1] + ":" + by_position[3] + ":" +
                                              by_position[2] + "\n" + by_id + "\n");
  ASSERT_EQ(run_command(scan("listed", "--trait fev1_litres --variants " + dir_ + "/variants.txt")), 0);
  const auto listed = data_rows(results("listed", "fev1_litres"));
  ASSERT_EQ(listed.size(), 2u);
  std::vector<std::string> ids = {listed[0][8], listed[1][8]};
  EXPECT_NE(std::find(ids.begin(), ids.end(), by_position[8]), ids.end());
  EXPECT_NE(std::find(ids.begin(), ids.end(), by_id_variant), ids.end());
}

TEST_F(Selection, TraitsTogetherEqualTraitsAlone) {
  ASSERT_EQ(run_command(scan("alone_fev1", "--trait fev1_litres")), 0);
  ASSERT_EQ(run_command(scan("alone_wheeze", "--trait winter_wheeze")), 0);
  EXPECT_EQ(results("whole", "fev1_litres"), results("alone_fev1", "fev1_litres"));
  EXPECT_EQ(results("whole", "winter_wheeze"), results("alone_wheeze", "winter_wheeze"));
}

}  // namespace
}  // namespace tamis::testing
