// Bad input and faults, through the tamis binary. Each case checks the exit
// code against the table in include/tamis/errors.hpp (repeated in the README),
// that the message names the file and the place, and that no result exists
// under a final name (PREFIX.TRAIT.tsv.gz, its .tbi or its sidecar); a .log
// and a .partial may remain.
#include <gtest/gtest.h>
#include <unistd.h>

#include <functional>
#include <sstream>
#include <string>
#include <utility>
#include <vector>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

// Exit codes from include/tamis/errors.hpp.
constexpr int kUsage = 2;
constexpr int kTableInput = 3;
constexpr int kGenotypeInput = 4;
constexpr int kModel = 5;
constexpr int kOutput = 6;

using Rows = std::vector<std::vector<std::string>>;

std::string join(const std::vector<std::string>& parts, const std::string& separator) {
  std::string text;
  for (std::size_t part_idx = 0; part_idx < parts.size(); ++part_idx) {
    if (part_idx) text += separator;
    text += parts[part_idx];
  }
  return text;
}

std::string join_rows(const Rows& rows) {
  std::string text;
  for (const std::vector<std::string>& row : rows) text += join(row, "\t") + "\n";
  return text;
}

Rows parse_rows(const std::string& text) {
  Rows rows;
  for (const std::string& line : lines_of(text)) rows.push_back(split_fields(line, '\t'));
  return rows;
}

std::size_t column_of(const Rows& rows, const std::string& name) {
  for (std::size_t column_idx = 0; column_idx < rows.front().size(); ++column_idx) {
    if (rows.front()[column_idx] == name) return column_idx;
  }
  ADD_FAILURE() << "the simulated table has no column " << name;
  return 0;
}

struct Outcome {
  int code = -1;
  std::string message;  // what tamis wrote on stderr
};

Outcome run_tamis(const std::string& arguments) {
  Outcome outcome;
  outcome.message = capture_command(tamis_binary() + " " + arguments + " 2>&1 >/dev/null", &outcome.code);
  return outcome;
}

void expect_message_names(const Outcome& outcome, const std::vector<std::string>& parts) {
  for (const std::string& part : parts) {
    EXPECT_NE(outcome.message.find(part), std::string::npos) << "missing '" << part << "' in:\n"
                                                             << outcome.message;
  }
}

void expect_no_final_results(const std::string& prefix, const std::vector<std::string>& traits) {
  for (const std::string& trait : traits) {
    const std::string final_path = prefix + "." + trait + ".tsv.gz";
    for (const std::string suffix : {"", ".tbi", "-meta.yaml"}) {
      EXPECT_FALSE(file_exists(final_path + suffix)) << final_path + suffix << " exists after a failed run";
    }
  }
}

// The simulated cohort of every test, made afresh in the test's own folder:
// ctest runs the tests of this file as parallel processes.
class InputErrors : public ::testing::Test {
 protected:
  void SetUp() override {
    const ::testing::TestInfo* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = make_temp_dir(std::string("input_errors/") + info->name());
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ + "/c --samples 300 --variants 200 --seed 3" +
                          " 2>/dev/null"),
              0);
    vcf_gz_ = dir_ + "/c.vcf.gz";
    table_ = dir_ + "/c.traits.tsv";
    table_rows_ = parse_rows(read_text_file(table_));
  }

  std::string scan_arguments(const std::string& genotypes, const std::string& table, const std::string& trait,
                             const std::string& prefix, int threads = 2, const std::string& extra = "",
                             const std::string& covariates = "age,sex,village") const {
    return "scan --genotypes " + genotypes + " --traits " + table + " --trait " + trait + " --covariates " +
           covariates + " --out " + prefix + " --threads " + std::to_string(threads) +
           " --quiet " + extra;
  }

  // Writes the cohort's table after `edit` and returns its path.
  std::string write_edited_table(const std::string& name, const std::function<void(Rows&)>& edit) const {
    Rows rows = table_rows_;
    edit(rows);
    const std::string path = dir_ + "/" + name;
    write_text_file(path, join_rows(rows));
    return path;
  }

  std::vector<std::string> vcf_lines() const { return lines_of(read_gzip_file(vcf_gz_)); }

  // The cohort as BCF (bcftools 1.16 view -Ob): the same records in the same
  // order, read through tamis's own BGZF stream rather than htslib's.
  std::string bcf_copy() const {
    const std::string path = dir_ + "/c.bcf";
    if (!file_exists(path)) {
      EXPECT_EQ(run_command("bcftools view -Ob -o '" + path + "' '" + vcf_gz_ + "' 2>/dev/null"), 0);
    }
    return path;
  }

  // The compressed copies whose damage the tests below make: {suffix, path}.
  std::vector<std::pair<std::string, std::string>> compressed_copies() const {
    return {{".vcf.gz", vcf_gz_}, {".bcf", bcf_copy()}};
  }

  static std::size_t first_record_line(const std::vector<std::string>& lines) {
    std::size_t line_idx = 0;
    while (line_idx < lines.size() && lines[line_idx].rfind("#", 0) == 0) ++line_idx;
    return line_idx;
  }

  // The chrom:pos of every record of the cohort, in file order.
  std::vector<std::string> record_places() const {
    const std::vector<std::string> lines = vcf_lines();
    std::vector<std::string> places;
    for (std::size_t line_idx = first_record_line(lines); line_idx < lines.size(); ++line_idx) {
      const std::vector<std::string> fields = split_fields(lines[line_idx], '\t');
      places.push_back(fields[0] + ":" + fields[1]);
    }
    return places;
  }

  // Each compressed copy damaged by `damage` fails at --threads 1 and 4 with
  // the position reached, and leaves no results.
  void expect_damaged_copies_give_the_position_reached(const std::string& name,
                                                       std::string (*damage)(const std::string&));

  // A plain-text copy of the cohort VCF with one sample's FORMAT value of
  // record `record_number` (1-based) replaced.
  std::string write_vcf_with_value(const std::string& name, std::size_t record_number, std::size_t sample_idx,
                                   const std::string& value, std::string* place) const {
    std::vector<std::string> lines = vcf_lines();
    std::string& line = lines[first_record_line(lines) + record_number - 1];
    std::vector<std::string> fields = split_fields(line, '\t');
    fields[9 + sample_idx] = value;
    line = join(fields, "\t");
    *place = fields[0] + ":" + fields[1];
    const std::string path = dir_ + "/" + name;
    write_text_file(path, join(lines, "\n") + "\n");
    return path;
  }

  std::string dir_;
  std::string vcf_gz_;
  std::string table_;
  Rows table_rows_;
};

// ---- files that cannot be read ----------------------------------------------

// Input paths are checked with the other options, before anything is read,
// so a missing file is a usage error naming the option and the path.
TEST_F(InputErrors, MissingTraitTableIsRefused) {
  const std::string absent = dir_ + "/absent.tsv";
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, absent, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kUsage) << outcome.message;
  expect_message_names(outcome, {"--traits", absent, "No such file"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, MissingGenotypeFileIsRefused) {
  const std::string absent = dir_ + "/absent.vcf.gz";
  const Outcome outcome = run_tamis(scan_arguments(absent, table_, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kUsage) << outcome.message;
  expect_message_names(outcome, {"--genotypes", absent, "No such file"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

// A directory passes the access() check but cannot be read as a file.
TEST_F(InputErrors, UnreadableTraitTableIsATableError) {
  const std::string folder = dir_ + "/a_folder";
  ASSERT_EQ(run_command("mkdir -p '" + folder + "'"), 0);
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, folder, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kTableInput) << outcome.message;
  expect_message_names(outcome, {folder + ": ", "reading the trait table failed"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, UnreadableGenotypeFileIsAGenotypeError) {
  const std::string folder = dir_ + "/a_folder";
  ASSERT_EQ(run_command("mkdir -p '" + folder + "'"), 0);
  const Outcome outcome = run_tamis(scan_arguments(folder, table_, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
  expect_message_names(outcome, {folder + ": ", "cannot open the genotype file"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

// ---- the table ----------------------------------------------------------------

TEST_F(InputErrors, UnknownTraitColumnListsTheColumns) {
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, table_, "fev1", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kTableInput) << outcome.message;
  expect_message_names(outcome, {table_ + ": ", "\"fev1\"", "age, sex, village, pc1, pc2, pc3, pc4, fev1_litres, "
                                                            "winter_wheeze"});
  expect_no_final_results(dir_ + "/s", {"fev1"});
}

TEST_F(InputErrors, UnknownCovariateColumnListsTheColumns) {
  const Outcome outcome =
      run_tamis(scan_arguments(vcf_gz_, table_, "fev1_litres", dir_ + "/s", 2, "", "age,height"));
  EXPECT_EQ(outcome.code, kTableInput) << outcome.message;
  expect_message_names(outcome, {table_ + ": ", "\"height\"", "age, sex, village, pc1"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, StrayTextInNumericColumnGivesLineAndToken) {
  // Row index 39 is line 40 of the file (the header is line 1).
  const std::string path =
      write_edited_table("stray.tsv", [](Rows& rows) { rows[39][column_of(rows, "age")] = "forty"; });
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kTableInput) << outcome.message;
  expect_message_names(outcome, {path + ", line 40", "\"age\"", "\"forty\""});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, DuplicateSampleInTableNamesBothLines) {
  std::string duplicated;
  const std::string path = write_edited_table("duplicate.tsv", [&](Rows& rows) {
    duplicated = rows[7][0];  // line 8
    rows[39][0] = duplicated;  // line 40
  });
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kTableInput) << outcome.message;
  expect_message_names(outcome, {path + ", line 40", "\"" + duplicated + "\"", "line 8", "line 40"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, DuplicateSampleInGenotypeFileNamesBothPositions) {
  std::vector<std::string> lines = vcf_lines();
  std::string& header = lines[first_record_line(lines) - 1];
  std::vector<std::string> columns = split_fields(header, '\t');
  const std::string duplicated = columns[9];
  columns[11] = duplicated;  // the third sample takes the first one's ID
  header = join(columns, "\t");
  const std::string path = dir_ + "/duplicate.vcf";
  write_text_file(path, join(lines, "\n") + "\n");
  const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
  expect_message_names(outcome, {path + ", header", "'" + duplicated + "'", "sample 1", "sample 3"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, NoSharedSamplesShowsIdsFromBothSides) {
  const std::string path = write_edited_table("renamed.tsv", [](Rows& rows) {
    for (std::size_t row_idx = 1; row_idx < rows.size(); ++row_idx) rows[row_idx][0] = "X_" + rows[row_idx][0];
  });
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kTableInput) << outcome.message;
  const std::string first_table_id = table_rows_[1][0];
  const std::string first_genotype_id = split_fields(vcf_lines()[first_record_line(vcf_lines()) - 1], '\t')[9];
  expect_message_names(outcome, {path + ": ", "\"participant\"", "\"X_" + first_table_id + "\"",
                                 "\"" + first_genotype_id + "\""});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

// ---- traits that cannot be analysed ---------------------------------------------

TEST_F(InputErrors, ConstantTraitIsAModelError) {
  const std::string path = write_edited_table("constant.tsv", [](Rows& rows) {
    const std::size_t trait = column_of(rows, "fev1_litres");
    for (std::size_t row_idx = 1; row_idx < rows.size(); ++row_idx) rows[row_idx][trait] = "2.5";
  });
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kModel) << outcome.message;
  expect_message_names(outcome, {path + ", column \"fev1_litres\"", "same value (2.5)"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, BinaryTraitWithoutCasesIsAModelError) {
  const std::string path = write_edited_table("no_cases.tsv", [](Rows& rows) {
    const std::size_t trait = column_of(rows, "winter_wheeze");
    for (std::size_t row_idx = 1; row_idx < rows.size(); ++row_idx) {
      if (rows[row_idx][trait] == "1") rows[row_idx][trait] = "0";
    }
  });
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "winter_wheeze", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kModel) << outcome.message;
  expect_message_names(outcome, {path + ", column \"winter_wheeze\"", "has 0 cases"});
  expect_no_final_results(dir_ + "/s", {"winter_wheeze"});
}

TEST_F(InputErrors, BinaryTraitWithoutControlsIsAModelError) {
  const std::string path = write_edited_table("no_controls.tsv", [](Rows& rows) {
    const std::size_t trait = column_of(rows, "winter_wheeze");
    for (std::size_t row_idx = 1; row_idx < rows.size(); ++row_idx) {
      if (rows[row_idx][trait] == "0") rows[row_idx][trait] = "1";
    }
  });
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "winter_wheeze", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kModel) << outcome.message;
  expect_message_names(outcome, {path + ", column \"winter_wheeze\"", " 0 controls"});
  expect_no_final_results(dir_ + "/s", {"winter_wheeze"});
}

// A text covariate with one level per sample spends every degree of freedom.
std::string write_household_table(const std::string& dir, Rows rows) {
  rows[0].push_back("household");
  for (std::size_t row_idx = 1; row_idx < rows.size(); ++row_idx) rows[row_idx].push_back("h_" + rows[row_idx][0]);
  const std::string path = dir + "/households.tsv";
  write_text_file(path, join_rows(rows));
  return path;
}

TEST_F(InputErrors, CovariatesWithoutResidualDegreesOfFreedomAreAModelError) {
  const std::string path = write_household_table(dir_, table_rows_);
  const Outcome outcome =
      run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/s", 2, "", "age,household"));
  EXPECT_EQ(outcome.code, kModel) << outcome.message;
  expect_message_names(outcome, {"'fev1_litres'", "no residual degrees of freedom"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

TEST_F(InputErrors, ResidualDegreesOfFreedomErrorNamesTheTable) {
  const std::string path = write_household_table(dir_, table_rows_);
  const Outcome outcome =
      run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/s", 2, "", "age,household"));
  EXPECT_EQ(outcome.code, kModel) << outcome.message;
  expect_message_names(outcome, {path, "fev1_litres", "no residual degrees of freedom"});
}

// ---- damaged compressed genotypes -------------------------------------------------

// BGZF ends with a fixed 28-byte empty block (SAMv1 specification, 4.1.2).
constexpr std::size_t kBgzfEofBytes = 28;

TEST_F(InputErrors, TruncatedBgzfIsRefusedBeforeAnyResult) {
  for (const auto& [suffix, source] : compressed_copies()) {
    const std::string data = read_text_file(source);
    const std::string path = dir_ + "/truncated" + suffix;
    write_text_file(path, data.substr(0, data.size() / 2));
    for (int threads : {1, 4}) {
      const std::string prefix = dir_ + "/s" + std::to_string(threads);
      const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", prefix, threads));
      EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
      // The missing end-of-file block is found when the file is opened, so the
      // place is the file itself.
      expect_message_names(outcome, {path + ": ", "end-of-file marker is missing"});
      expect_no_final_results(prefix, {"fev1_litres"});
    }
  }
}

// The message names the record where reading stopped, N, and a place that
// is either the chrom:pos of record N - 1, the last record read whole
// ("PATH, record N (after CHROM:POS)"), or that of record N itself
// ("PATH, record N (CHROM:POS)").
void expect_position_reached(const Outcome& outcome, const std::string& path,
                             const std::vector<std::string>& places) {
  const std::string lead = path + ", record ";
  const std::size_t at = outcome.message.find(lead);
  ASSERT_NE(at, std::string::npos) << outcome.message;
  std::istringstream rest(outcome.message.substr(at + lead.size()));
  std::size_t record_number = 0;
  std::string place;
  rest >> record_number >> place;
  const bool after = place == "(after";
  if (after) rest >> place;
  ASSERT_GE(place.size(), 3u) << outcome.message;
  ASSERT_EQ(place.substr(place.size() - 2), "):") << "the place ends the where-part: " << outcome.message;
  place = place.substr(after ? 0 : 1, place.size() - (after ? 2 : 3));
  ASSERT_GE(record_number, 2u);
  ASSERT_LE(record_number, places.size());
  EXPECT_EQ(place, places[record_number - (after ? 2 : 1)]) << outcome.message;
}

std::string cut_with_end_marker(const std::string& data) {
  return data.substr(0, data.size() / 2) + data.substr(data.size() - kBgzfEofBytes);
}

std::string with_flipped_bytes(const std::string& original) {
  std::string data = original;
  for (std::size_t byte_idx = data.size() / 2; byte_idx < data.size() / 2 + 16; ++byte_idx) data[byte_idx] ^= 0x5A;
  return data;
}

// The BCF copy holds the same records as the VCF.gz, so record N names the
// same chrom:pos in both.
// The BCF copy holds the same records as the VCF.gz, so record N names the
// same chrom:pos in both.
void InputErrors::expect_damaged_copies_give_the_position_reached(const std::string& name,
                                                                   std::string (*damage)(const std::string&)) {
  const std::vector<std::string> places = record_places();
  for (const auto& [suffix, source] : compressed_copies()) {
    const std::string path = dir_ + "/" + name + suffix;
    write_text_file(path, damage(read_text_file(source)));
    for (int threads : {1, 4}) {
      SCOPED_TRACE(path + " at --threads " + std::to_string(threads));
      const std::string prefix = dir_ + "/s" + std::to_string(threads);
      const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", prefix, threads));
      EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
      expect_position_reached(outcome, path, places);
      expect_no_final_results(prefix, {"fev1_litres"});
    }
  }
}

TEST_F(InputErrors, TruncatedBgzfWithEndMarkerGivesThePositionReached) {
  expect_damaged_copies_give_the_position_reached("cut_with_marker", cut_with_end_marker);
}

TEST_F(InputErrors, CorruptBgzfBlockGivesThePositionReached) {
  expect_damaged_copies_give_the_position_reached("flipped", with_flipped_bytes);
}

// A CRC failure or a cut block is damage to the file, and the fix is a fresh
// copy, not an edit of the record that happened to be cut.
TEST_F(InputErrors, DamagedBgzfIsReportedAsDamageNotAsABadRecord) {
  for (const auto& [suffix, source] : compressed_copies()) {
    const std::string data = read_text_file(source);
    const std::string cut = dir_ + "/cut_with_marker" + suffix;
    const std::string flipped = dir_ + "/flipped" + suffix;
    write_text_file(cut, cut_with_end_marker(data));
    write_text_file(flipped, with_flipped_bytes(data));
    for (const std::string& path : {cut, flipped}) {
      for (int threads : {1, 4}) {
        const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", dir_ + "/s", threads));
        EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
        expect_message_names(outcome, {path + ", record ", "damaged or cut short", "bgzip -t"});
      }
    }
  }
}

// ---- malformed records -------------------------------------------------------------

struct BadValue {
  const char* name;
  const char* value;      // replaces sample 5's GT:DS value in record 10
  const char* dosage_from;
  const char* expected;   // part of the message
};

// Names the case in ctest's test names instead of its bytes.
void PrintTo(const BadValue& bad, std::ostream* out) { *out << bad.name; }

class MalformedRecord : public InputErrors, public ::testing::WithParamInterface<BadValue> {};

TEST_P(MalformedRecord, NamesTheRecordAndChromPos) {
  const BadValue& bad = GetParam();
  std::string place;
  const std::string path = write_vcf_with_value(std::string(bad.name) + ".vcf", 10, 4, bad.value, &place);
  for (int threads : {1, 4}) {
    const std::string prefix = dir_ + "/s" + std::to_string(threads);
    const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", prefix, threads,
                                                     std::string("--dosage-from ") + bad.dosage_from));
    EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
    expect_message_names(outcome, {path + ", record 10 (" + place + ")", bad.expected});
    expect_no_final_results(prefix, {"fev1_litres"});
  }
}

INSTANTIATE_TEST_SUITE_P(
    Values, MalformedRecord,
    ::testing::Values(BadValue{"ds_not_a_number", "0/1:abc", "DS", "could not parse"},
                      BadValue{"ds_two_values_for_one_alt", "0/1:0.5,0.25", "DS", "DS has 2 value(s), expected 1"},
                      BadValue{"ds_above_two", "0/1:2.5", "DS", "dosage of 2.5"},
                      BadValue{"gt_unparsable", "x/y:0.5", "GT", "could not parse"},
                      BadValue{"gt_allele_beyond_alt", "0/7:0.5", "GT", "GT names allele 7"}),
    [](const ::testing::TestParamInfo<BadValue>& info) { return std::string(info.param.name); });

// GP: a small file of its own, since the simulated cohort carries GT and DS.
std::string gp_vcf(const std::string& third_record_gp) {
  std::string text =
      "##fileformat=VCFv4.3\n##contig=<ID=1,length=100000>\n"
      "##FORMAT=<ID=GP,Number=G,Type=Float,Description=\"Genotype probabilities\">\n"
      "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT";
  for (int sample_idx = 1; sample_idx <= 8; ++sample_idx) text += "\tP" + std::to_string(sample_idx);
  text += "\n";
  const char* probabilities[] = {"1,0,0", "0,1,0", "0,0,1", "0.2,0.6,0.2"};
  for (int record_idx = 1; record_idx <= 4; ++record_idx) {
    text += "1\t" + std::to_string(100 * record_idx) + "\t.\tA\tG\t.\tPASS\t.\tGP";
    for (int sample_idx = 0; sample_idx < 8; ++sample_idx) {
      const bool bad = record_idx == 3 && sample_idx == 5;
      text += "\t" + (bad ? third_record_gp : std::string(probabilities[(sample_idx + record_idx) % 4]));
    }
    text += "\n";
  }
  return text;
}

std::string gp_table() {
  return "sample\tscore\nP1\t1.5\nP2\t2.5\nP3\t0.5\nP4\t3.0\nP5\t2.0\nP6\t1.0\nP7\t2.2\nP8\t0.7\n";
}

TEST_F(InputErrors, GpWithANonNumberNamesChromPos) {
  const std::string vcf = dir_ + "/gp_text.vcf";
  const std::string table = dir_ + "/gp.tsv";
  write_text_file(vcf, gp_vcf("0.1,zero,0.9"));
  write_text_file(table, gp_table());
  const Outcome outcome = run_tamis("scan --genotypes " + vcf + " --traits " + table + " --trait score --out " +
                                    dir_ + "/s --quiet --dosage-from GP");
  EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
  expect_message_names(outcome, {vcf + ", record 3 (1:300)"});
  expect_no_final_results(dir_ + "/s", {"score"});
}

TEST_F(InputErrors, GpWithTheWrongCountNamesChromPos) {
  const std::string vcf = dir_ + "/gp_count.vcf";
  const std::string table = dir_ + "/gp.tsv";
  write_text_file(vcf, gp_vcf("0.1,0.2,0.3,0.4"));
  write_text_file(table, gp_table());
  const Outcome outcome = run_tamis("scan --genotypes " + vcf + " --traits " + table + " --trait score --out " +
                                    dir_ + "/s --quiet --dosage-from GP");
  EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
  expect_message_names(outcome, {vcf + ", record 3 (1:300)", "'P6'", "GP has 4 value(s)"});
  expect_no_final_results(dir_ + "/s", {"score"});
}

// 50,001 alleles have 50,001 x 50,002 / 2 = 1,250,075,001 diploid genotypes
// (VCF 4.3, section 1.6.2, Number=G), which fits an int although the product
// before the halving does not.
TEST_F(InputErrors, GpCountForVeryManyAllelesIsComputedWithoutOverflow) {
  std::string text = gp_vcf("0.2,0.6,0.2");
  std::string alts = "C";
  for (int allele_idx = 1; allele_idx < 50000; ++allele_idx) alts += ",C";
  text += "1\t500\t.\tA\t" + alts + "\t.\t.\t.\tGP";
  for (int sample_idx = 0; sample_idx < 8; ++sample_idx) text += "\t0.5";
  text += "\n";
  const std::string vcf = dir_ + "/many_alleles.vcf";
  const std::string table = dir_ + "/gp.tsv";
  write_text_file(vcf, text);
  write_text_file(table, gp_table());
  const Outcome outcome = run_tamis("scan --genotypes " + vcf + " --traits " + table + " --trait score --out " +
                                    dir_ + "/s --quiet --dosage-from GP");
  EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
  expect_message_names(outcome, {vcf + ", record 5 (1:500)", "expected 1250075001 (diploid)"});
  expect_no_final_results(dir_ + "/s", {"score"});
}

TEST_F(InputErrors, RecordWithTooFewSampleColumnsNamesChromPos) {
  std::vector<std::string> lines = vcf_lines();
  std::string& line = lines[first_record_line(lines) + 6];  // record 7
  std::vector<std::string> fields = split_fields(line, '\t');
  const std::string place = fields[0] + ":" + fields[1];
  fields.resize(fields.size() - 3);
  line = join(fields, "\t");
  const std::string path = dir_ + "/short_record.vcf";
  write_text_file(path, join(lines, "\n") + "\n");
  const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", dir_ + "/s"));
  EXPECT_EQ(outcome.code, kGenotypeInput) << outcome.message;
  expect_message_names(outcome, {path + ", record 7 (" + place + ")"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres"});
}

// ---- input that is fine ---------------------------------------------------------------

TEST_F(InputErrors, HeaderOnlyGenotypeFileGivesAHeaderOnlyResult) {
  std::vector<std::string> lines = vcf_lines();
  lines.resize(first_record_line(lines));
  const std::string path = dir_ + "/header_only.vcf";
  write_text_file(path, join(lines, "\n") + "\n");
  ASSERT_EQ(run_tamis(scan_arguments(vcf_gz_, table_, "fev1_litres", dir_ + "/full")).code, 0);
  const Outcome outcome = run_tamis(scan_arguments(path, table_, "fev1_litres", dir_ + "/empty"));
  ASSERT_EQ(outcome.code, 0) << outcome.message;
  const std::vector<std::string> full = lines_of(read_gzip_file(dir_ + "/full.fev1_litres.tsv.gz"));
  const std::vector<std::string> empty = lines_of(read_gzip_file(dir_ + "/empty.fev1_litres.tsv.gz"));
  ASSERT_FALSE(full.empty());
  EXPECT_EQ(empty, std::vector<std::string>{full.front()}) << "only the header line";
  EXPECT_TRUE(file_exists(dir_ + "/empty.fev1_litres.tsv.gz.tbi"));
  // tabix 1.16 accepts the index and finds nothing (common practice: an
  // empty indexed file answers every query with no lines).
  int code = -1;
  EXPECT_EQ(capture_command("tabix " + dir_ + "/empty.fev1_litres.tsv.gz 1:1-1000000000", &code), "");
  EXPECT_EQ(code, 0);
  EXPECT_NE(read_text_file(dir_ + "/empty.log").find("note: the genotype files hold no records"), std::string::npos);
}

struct TableHygiene {
  const char* name;
  std::function<std::string(const std::string&)> dirty;
};

std::string with_crlf(const std::string& text) {
  std::string out;
  for (char letter : text) out += letter == '\n' ? std::string("\r\n") : std::string(1, letter);
  return out;
}

std::string with_bom(const std::string& text) { return "\xEF\xBB\xBF" + text; }

std::string with_trailing_spaces(const std::string& text) {
  std::string out;
  for (const std::string& line : lines_of(text)) out += line + "  \n";
  return out;
}

std::string without_final_newline(const std::string& text) { return text.substr(0, text.size() - 1); }

void PrintTo(const TableHygiene& hygiene, std::ostream* out) { *out << hygiene.name; }

class AcceptedTable : public InputErrors, public ::testing::WithParamInterface<TableHygiene> {};

// README ("Input rules"): these give results identical to the clean file.
TEST_P(AcceptedTable, GivesResultsIdenticalToTheCleanFile) {
  const std::string clean = read_text_file(table_);
  ASSERT_EQ(clean.back(), '\n');
  const std::string path = dir_ + "/dirty.tsv";
  write_text_file(path, GetParam().dirty(clean));
  ASSERT_EQ(run_tamis(scan_arguments(vcf_gz_, table_, "fev1_litres", dir_ + "/clean", 1)).code, 0);
  const Outcome outcome = run_tamis(scan_arguments(vcf_gz_, path, "fev1_litres", dir_ + "/dirty", 2));
  ASSERT_EQ(outcome.code, 0) << outcome.message;
  for (const std::string suffix : {".tsv.gz", ".tsv.gz.tbi"}) {
    const std::string clean_bytes = read_text_file(dir_ + "/clean.fev1_litres" + suffix);
    EXPECT_FALSE(clean_bytes.empty());
    EXPECT_TRUE(clean_bytes == read_text_file(dir_ + "/dirty.fev1_litres" + suffix)) << suffix << " differs";
  }
}

INSTANTIATE_TEST_SUITE_P(
    Variants, AcceptedTable,
    ::testing::Values(TableHygiene{"crlf", with_crlf}, TableHygiene{"utf8_bom", with_bom},
                      TableHygiene{"trailing_spaces", with_trailing_spaces},
                      TableHygiene{"no_final_newline", without_final_newline},
                      TableHygiene{"all_at_once",
                                   [](const std::string& text) {
                                     return without_final_newline(with_bom(with_crlf(with_trailing_spaces(text))));
                                   }}),
    [](const ::testing::TestParamInfo<TableHygiene>& info) { return std::string(info.param.name); });

// ---- faults while writing ------------------------------------------------------------------

// A cohort of many blocks, so that a scan stopped after its third block is
// stopped mid-run, and writes big enough to meet a small file-size limit.
class InterruptedScan : public ::testing::Test {
 protected:
  void SetUp() override {
    const ::testing::TestInfo* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = make_temp_dir(std::string("input_errors/") + info->name());
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ + "/big --samples 2000 --variants 4000" +
                          " --seed 4 2>/dev/null"),
              0);
  }

  // Confirming every variant makes the rows of each block costly to write
  // (the interruption tests stop after a few blocks); the full-disk cases
  // only need the output to grow, which is quicker without it.
  std::string scan_arguments(const std::string& prefix, bool confirm_every_variant = true) const {
    return "scan --genotypes " + dir_ + "/big.vcf.gz --traits " + dir_ + "/big.traits.tsv --trait fev1_litres" +
           " --trait winter_wheeze --covariates age,sex,village,pc1,pc2,pc3,pc4 --threads 2 --quiet" +
           (confirm_every_variant ? " --confirm-below 1" : "") + " --out " + prefix;
  }

  // Runs the scan until it has written its first blocks, when it sends
  // itself `signal_name` (a test hook: no race against a timer); returns
  // its exit status as the shell sees it.
  int scan_and_signal(const std::string& prefix, const std::string& signal_name, std::string* message) const {
    const int code = run_command("TAMIS_TEST_SIGNAL_AFTER_BLOCK=3:" + signal_name + " " + tamis_binary() + " " +
                                 scan_arguments(prefix) + " 2> " + prefix + ".stderr");
    *message = read_text_file(prefix + ".stderr");
    return code;
  }

  std::string dir_;
};

TEST_F(InterruptedScan, SigtermLeavesNoFinalFile) {
  std::string message;
  const int status = scan_and_signal(dir_ + "/s", "TERM", &message);
  // The handler exits with 128 + the signal number (the shell's convention,
  // common practice): 143 for SIGTERM.
  EXPECT_EQ(status, 143) << message;
  EXPECT_NE(message.find("interrupted"), std::string::npos) << message;
  expect_no_final_results(dir_ + "/s", {"fev1_litres", "winter_wheeze"});
}

TEST_F(InterruptedScan, SigkillLeavesNoFinalFile) {
  std::string message;
  const int status = scan_and_signal(dir_ + "/s", "KILL", &message);
  EXPECT_EQ(status, 137) << "128 + SIGKILL (9), as bash reports it";
  // Nothing can run on SIGKILL, so a .partial may remain, but never a final name.
  expect_no_final_results(dir_ + "/s", {"fev1_litres", "winter_wheeze"});
}

// `ulimit -f` (bash 5.2.15, in 1024-byte blocks) makes writes beyond the
// limit fail as on a full disk. The scan writes several hundred KB per trait.
TEST_F(InterruptedScan, FullDiskIsAnOutputError) {
  Outcome outcome;
  outcome.message = capture_command("bash -c 'ulimit -f 64; exec " + tamis_binary() + " " +
                                        scan_arguments(dir_ + "/s", false) + "' 2>&1 >/dev/null",
                                    &outcome.code);
  EXPECT_EQ(outcome.code, kOutput) << outcome.message;
  expect_message_names(outcome, {dir_ + "/s.fev1_litres.tsv.gz", "File too large"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres", "winter_wheeze"});
}

// The same with SIGXFSZ ignored by the parent (an ignored signal stays
// ignored across exec, POSIX), so that the write itself fails with EFBIG.
TEST_F(InterruptedScan, FullDiskWithSigxfszIgnoredIsAnOutputError) {
  Outcome outcome;
  outcome.message = capture_command("bash -c \"trap '' XFSZ; ulimit -f 64; exec " + tamis_binary() + " " +
                                        scan_arguments(dir_ + "/s", false) + "\" 2>&1 >/dev/null",
                                    &outcome.code);
  EXPECT_EQ(outcome.code, kOutput) << outcome.message;
  expect_message_names(outcome, {dir_ + "/s.fev1_litres.tsv.gz", "File too large"});
  expect_no_final_results(dir_ + "/s", {"fev1_litres", "winter_wheeze"});
}

}  // namespace
}  // namespace tamis::testing
