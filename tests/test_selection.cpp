// Sample and variant selection in a scan: --keep-samples / --drop-samples,
// --region, --variants, and traits scanned together or alone.
#include <gtest/gtest.h>

#include <algorithm>
#include <map>
#include <set>
#include <sstream>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/scan.hpp"

namespace tamis::testing {
namespace {

// ---- variant lists, in process ------------------------------------------------------------

VariantSelection select_list(const std::string& text, ChromosomeCodes codes, std::vector<GenomicRegion>& regions,
                             bool& indexed) {
  static int list_count = 0;
  static const std::string dir = make_temp_dir("selection_lists");
  const std::string path = dir + "/list" + std::to_string(++list_count) + ".txt";
  write_text_file(path, text);
  VariantSelection selection;
  indexed = select_from_list(path, codes, selection, regions);
  return selection;
}

TEST(VariantList, CompleteKeyIsTakenAsAnAlleleAndAsAnId) {
  std::vector<GenomicRegion> regions;
  bool indexed = false;
  const VariantSelection selection = select_list("chr1:12345:A:G\n", ChromosomeCodes::ssf, regions, indexed);
  EXPECT_TRUE(indexed);
  EXPECT_EQ(selection.variant_ids, std::set<std::string>({"1_12345_A_G"}));
  EXPECT_EQ(selection.record_ids, std::set<std::string>({"chr1:12345:A:G"}));
  EXPECT_EQ(selection.size(), 1u);
  std::set<std::string> contigs;
  for (const GenomicRegion& region : regions) {
    EXPECT_EQ(region.first, 12345);
    EXPECT_EQ(region.last, 12345);
    contigs.insert(region.contig);
  }
  EXPECT_EQ(contigs, std::set<std::string>({"1", "chr1"}));
  // Either way: the allele at that position, or any record whose ID is the entry.
  EXPECT_TRUE(selection.takes("t", ".", "1_12345_A_G"));
  EXPECT_TRUE(selection.takes("t", "chr1:12345:A:G", "1_99999_C_T"));
  EXPECT_FALSE(selection.takes("t", ".", "1_12345_A_C"));
}

TEST(VariantList, KeysTakeBasesOfAnyCaseAndSymbolicOrSpanningAlts) {
  std::vector<GenomicRegion> regions;
  bool indexed = false;
  const VariantSelection selection =
      select_list("X:100:ACGTN:acgtn\n2:200:A:<DEL>\n2:300:AT:*\n", ChromosomeCodes::ssf, regions, indexed);
  EXPECT_TRUE(indexed);
  EXPECT_EQ(selection.variant_ids, std::set<std::string>({"23_100_ACGTN_acgtn", "2_200_A_<DEL>", "2_300_AT_*"}));
}

TEST(VariantList, AsIsCodesKeepTheContigOfAKey) {
  std::vector<GenomicRegion> regions;
  bool indexed = false;
  const VariantSelection selection = select_list("chr1:12345:A:G\n", ChromosomeCodes::as_is, regions, indexed);
  EXPECT_EQ(selection.variant_ids, std::set<std::string>({"chr1_12345_A_G"}));
  ASSERT_EQ(regions.size(), 1u);
  EXPECT_EQ(regions[0].contig, "chr1");
}

TEST(VariantList, EveryOtherLineIsAnIdMatchedExactly) {
  // Not a complete chr:pos:ref:alt: too few or too many parts, a position that
  // is not a whole number from 1, an empty part, alleles that are not bases
  // (an HLA allele name has four colon-separated parts too).
  const std::vector<std::string> ids = {"rs12345",   "chr1:16190", "1:12345",    "1:12345:A",  "1:12345:A:G:T",
                                        "1:0:A:G",   "1:12a:A:G",  "1:-5:A:G",   "1:12345:A:", ":12345:A:G",
                                        "HLA-A*01:01:01:01", "1:12345:*:A", "1:12345:A:G,T"};
  std::string text = "# candidate list\n\n";
  for (const std::string& id : ids) text += "  " + id + "\r\n";  // spaces and CR around a line are not part of it
  std::vector<GenomicRegion> regions;
  bool indexed = true;
  const VariantSelection selection = select_list(text, ChromosomeCodes::ssf, regions, indexed);
  EXPECT_FALSE(indexed);  // IDs can be anywhere, so the files are read whole
  EXPECT_TRUE(regions.empty());
  EXPECT_TRUE(selection.variant_ids.empty());
  EXPECT_EQ(selection.record_ids, std::set<std::string>(ids.begin(), ids.end()));
  EXPECT_EQ(selection.size(), ids.size());
  EXPECT_TRUE(selection.takes("t", "chr1:16190", "1_16190_A_G"));
  EXPECT_FALSE(selection.takes("t", "chr1:161900", "1_161900_A_G"));
  EXPECT_FALSE(selection.takes("t", "chr1:16190:A", "1_16190_A_G"));
  EXPECT_FALSE(selection.takes("t", "CHR1:16190", "1_16190_A_G"));
  EXPECT_FALSE(selection.takes("t", ".", "1_12345_A_G"));  // 1:12345:A: names no allele
}

TEST(VariantList, IdMatchesTheWholeColumnOrOneOfItsSemicolonSeparatedIds) {
  // VCF 4.3 (hts-specs), section 1.6.1: ID is a semicolon-separated list of IDs.
  std::vector<GenomicRegion> regions;
  bool indexed = true;
  const VariantSelection selection = select_list("chr2:500\nsr_a;sr_b\n", ChromosomeCodes::ssf, regions, indexed);
  EXPECT_TRUE(selection.takes("t", "sr_x7;chr2:500", "2_9_A_G"));
  EXPECT_TRUE(selection.takes("t", "chr2:500;sr_x7", "2_9_A_G"));
  EXPECT_TRUE(selection.takes("t", "sr_a;sr_b", "2_9_A_G"));
  EXPECT_FALSE(selection.takes("t", "sr_a", "2_9_A_G"));
  EXPECT_FALSE(selection.takes("t", "sr_x7;chr2:5000", "2_9_A_G"));
  EXPECT_FALSE(selection.takes("t", ".", "2_9_A_G"));
}

TEST(VariantList, MissingIdMarkAndLinesWithSpacesAreRefusedWithTheirLine) {
  for (const std::string& bad : {std::string("."), std::string("rs1 rs2"), std::string("1\t12345")}) {
    std::vector<GenomicRegion> regions;
    bool indexed = true;
    try {
      select_list("rs7\n" + bad + "\n", ChromosomeCodes::ssf, regions, indexed);
      ADD_FAILURE() << "accepted '" << bad << "'";
    } catch (const Error& error) {
      EXPECT_EQ(error.code(), ExitCode::usage);
      EXPECT_NE(error.where().find(", line 2"), std::string::npos) << error.where();
    }
  }
}

// ---- scans with sample and variant selection ------------------------------------------------


// IDs written into a copy of the cohort's VCF (ids.vcf.gz) for the variant
// list tests: the colon IDs a list selects, decoys that only look like them,
// and the ID of a record that spells its own position with the alleles
// swapped, so that only an ID match takes it.
enum ListedRecord {
  colon_id,
  colon_number_id,
  complete_id_elsewhere,
  multiple_ids,
  by_key,
  own_key_swapped,
  decoy_longer,
  decoy_prefix,
  listed_record_count
};

class Selection : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("selection");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 600 --variants 900 --seed 8 2>/dev/null"),
              0);
    ASSERT_EQ(run_command(scan("whole", "--trait fev1_litres --trait winter_wheeze")), 0);
    write_vcf_with_ids();
    ASSERT_EQ(run_command(scan("ids_whole", "--trait fev1_litres", "ids.vcf.gz")), 0);
  }
  static std::string scan(const std::string& name, const std::string& extra,
                          const std::string& genotypes = "cohort.vcf.gz", int threads = 2) {
    return tamis_binary() + " scan --genotypes " + dir_ + "/" + genotypes + " --traits " + dir_ +
           "/cohort.traits.tsv --covariates age,sex,pc1 --quiet --threads " + std::to_string(threads) + " --out " +
           dir_ + "/" + name + " " + extra;
  }
  static std::string results(const std::string& name, const std::string& trait) {
    return read_gzip_file(dir_ + "/" + name + "." + trait + ".tsv.gz");
  }
  static std::string key_of(const std::vector<std::string>& vcf_fields) {
    return vcf_fields[0] + "_" + vcf_fields[1] + "_" + vcf_fields[3] + "_" + vcf_fields[4];
  }
  // Every 20th record that the whole scan wrote a fev1_litres row for gets
  // the next ID; bgzip and tabix (htslib 1.16) compress and index the copy.
  static void write_vcf_with_ids() {
    std::set<std::string> written;
    for (const auto& row : data_rows(results("whole", "fev1_litres"))) written.insert(row.at(8));
    std::string text;
    std::size_t eligible = 0;
    for (const std::string& line : lines_of(read_gzip_file(dir_ + "/cohort.vcf.gz"))) {
      std::vector<std::string> fields = split_fields(line);
      const bool record = !line.empty() && line[0] != '#';
      if (record && written.count(key_of(fields)) && ++eligible % 20 == 0 && records_.size() < listed_record_count) {
        fields[2] = id_of(static_cast<ListedRecord>(records_.size()), fields);
        records_.push_back(fields);
      }
      for (std::size_t field_idx = 0; field_idx < fields.size(); ++field_idx) {
        text += (field_idx ? "\t" : "") + fields[field_idx];
      }
      text += "\n";
    }
    ASSERT_EQ(records_.size(), static_cast<std::size_t>(listed_record_count));
    write_text_file(dir_ + "/ids.vcf", text);
    ASSERT_EQ(run_command("bgzip -f " + dir_ + "/ids.vcf && tabix -p vcf " + dir_ + "/ids.vcf.gz"), 0);
  }
  static std::string id_of(ListedRecord record, const std::vector<std::string>& fields) {
    switch (record) {
      case colon_id: return "chr1:16190";
      case colon_number_id: return "1:12345";
      case complete_id_elsewhere: return "chr1:12345:A:G";
      case multiple_ids: return "sr_x7;chr2:500";
      case own_key_swapped: return fields[0] + ":" + fields[1] + ":" + fields[4] + ":" + fields[3];
      case decoy_longer: return "chr1:16190:A";
      case decoy_prefix: return "1:123456";
      default: return fields[2];
    }
  }
  static std::string key_entry(ListedRecord record) {
    const std::vector<std::string>& fields = records_.at(record);
    return fields[0] + ":" + fields[1] + ":" + fields[3] + ":" + fields[4];
  }
  // The whole scan's results file of ids.vcf.gz cut to these records' rows.
  static std::string expected_rows(const std::vector<ListedRecord>& listed) {
    std::set<std::string> keys;
    for (ListedRecord record : listed) keys.insert(key_of(records_.at(record)));
    const std::vector<std::string> lines = lines_of(results("ids_whole", "fev1_litres"));
    std::string text = lines.at(0) + "\n";
    for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
      if (keys.count(split_fields(lines[line_idx]).at(8))) text += lines[line_idx] + "\n";
    }
    return text;
  }
  static std::string dir_;
  static std::vector<std::vector<std::string>> records_;  // VCF fields of the records given IDs, by ListedRecord
};
std::string Selection::dir_;
std::vector<std::vector<std::string>> Selection::records_;

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

TEST_F(Selection, ColonIdsAndKeysSelectExactlyTheirRecordsAtOneAndFourThreads) {
  write_text_file(dir_ + "/colon_ids.txt", "# colon IDs, as real files write them\nchr1:16190\n1:12345\n"
                                            "chr1:12345:A:G\nchr2:500\n\n" + key_entry(by_key) + "\n");
  for (int threads : {1, 4}) {
    ASSERT_EQ(run_command(scan("colon_ids_" + std::to_string(threads),
                               "--trait fev1_litres --variants " + dir_ + "/colon_ids.txt", "ids.vcf.gz", threads)),
              0);
  }
  // Not the decoys chr1:16190:A and 1:123456, nor the record whose ID is its own key with swapped alleles.
  const std::string expected = expected_rows({colon_id, colon_number_id, complete_id_elsewhere, multiple_ids, by_key});
  ASSERT_EQ(lines_of(expected).size(), 6u);
  EXPECT_EQ(results("colon_ids_1", "fev1_litres"), expected);
  EXPECT_EQ(results("colon_ids_4", "fev1_litres"), expected);
  EXPECT_NE(read_text_file(dir_ + "/colon_ids_1.log").find("selected 5 variants (reading the files whole)"),
            std::string::npos);
}

TEST_F(Selection, CompleteKeysAloneAreReadThroughTheIndexAndMatchAsIds) {
  // The second entry names no allele of its record (REF and ALT swapped) but is its ID.
  write_text_file(dir_ + "/keys.txt", key_entry(by_key) + "\n" + records_.at(own_key_swapped)[2] + "\n");
  ASSERT_EQ(run_command(scan("keys", "--trait fev1_litres --variants " + dir_ + "/keys.txt", "ids.vcf.gz")), 0);
  const std::string expected = expected_rows({by_key, own_key_swapped});
  ASSERT_EQ(lines_of(expected).size(), 3u);
  EXPECT_EQ(results("keys", "fev1_litres"), expected);
  EXPECT_NE(read_text_file(dir_ + "/keys.log").find("selected 2 variants (through the index)"), std::string::npos);
}

TEST_F(Selection, ConfirmTakesColonIdsToo) {
  write_text_file(dir_ + "/confirm_ids.txt", "chr1:16190\n1:12345\n");
  ASSERT_EQ(run_command(tamis_binary() + " confirm --genotypes " + dir_ + "/ids.vcf.gz --traits " + dir_ +
                        "/cohort.traits.tsv --covariates age,sex,pc1 --quiet --trait fev1_litres --variants " + dir_ +
                        "/confirm_ids.txt --out " + dir_ + "/confirmed"),
            0);
  std::set<std::string> keys;
  for (const auto& row : data_rows(results("confirmed", "fev1_litres"))) keys.insert(row.at(8));
  EXPECT_EQ(keys, std::set<std::string>({key_of(records_.at(colon_id)), key_of(records_.at(colon_number_id))}));
}

TEST_F(Selection, TraitsTogetherEqualTraitsAlone) {
  ASSERT_EQ(run_command(scan("alone_fev1", "--trait fev1_litres")), 0);
  ASSERT_EQ(run_command(scan("alone_wheeze", "--trait winter_wheeze")), 0);
  EXPECT_EQ(results("whole", "fev1_litres"), results("alone_fev1", "fev1_litres"));
  EXPECT_EQ(results("whole", "winter_wheeze"), results("alone_wheeze", "winter_wheeze"));
}

}  // namespace
}  // namespace tamis::testing
