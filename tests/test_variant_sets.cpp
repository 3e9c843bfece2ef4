// Variant-set definitions: the BED and list formats, their checks, and
// find_sets against a brute-force scan over every set.
#include <gtest/gtest.h>
#include <zlib.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <random>
#include <thread>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/variant_sets.hpp"

namespace tamis {
namespace {

using testing::make_temp_dir;
using testing::write_text_file;

std::string temp_dir() {
  static const std::string dir = make_temp_dir("test_variant_sets");
  return dir;
}

std::string write_file(const std::string& name, const std::string& text) {
  const std::string path = temp_dir() + "/" + name;
  write_text_file(path, text);
  return path;
}

// Writes `text` as one gzip member per part, as BGZF writes its blocks.
std::string write_gzip_file(const std::string& name, const std::vector<std::string>& parts) {
  const std::string path = temp_dir() + "/" + name;
  std::remove(path.c_str());
  for (const std::string& part : parts) {
    gzFile file = gzopen(path.c_str(), "ab");
    EXPECT_NE(file, nullptr);
    EXPECT_EQ(gzwrite(file, part.data(), static_cast<unsigned>(part.size())), static_cast<int>(part.size()));
    gzclose(file);
  }
  return path;
}

std::vector<std::string> names_of(const VariantSets& sets, const std::vector<SetMembership>& members) {
  std::vector<std::string> names;
  for (const SetMembership& member : members) names.push_back(sets.set(member.set_index).name);
  return names;
}

std::vector<std::string> find_names(const VariantSets& sets, const std::string& contig_key, std::int64_t position,
                                    const std::string& id = ".", const std::string& ref = "A",
                                    const std::string& alt = "G") {
  std::vector<SetMembership> members;
  sets.find_sets(contig_key, position, id, ref, alt, members);
  return names_of(sets, members);
}

using Names = std::vector<std::string>;

Error load_error(const std::string& path, const SetFileOptions& options = {}) {
  try {
    VariantSets::load(path, options);
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), ExitCode::usage);
    EXPECT_FALSE(error.fix().empty()) << error.what();
    return error;
  }
  ADD_FAILURE() << "no error for " << path;
  return Error(ExitCode::success, "", "");
}

// ---- formats and contig keys -------------------------------------------------

TEST(VariantSets, FormatIsToldByTheFileName) {
  EXPECT_EQ(set_file_format_of("saltmarsh/genes.bed"), SetFileFormat::bed);
  EXPECT_EQ(set_file_format_of("genes.BED.gz"), SetFileFormat::bed);
  EXPECT_EQ(set_file_format_of("masks.txt"), SetFileFormat::list);
  EXPECT_EQ(set_file_format_of("masks.tsv.gz"), SetFileFormat::list);
  EXPECT_EQ(set_file_format_of("bed_masks.txt"), SetFileFormat::list);
}

TEST(VariantSets, ContigKeysAgreeAcrossNamingStyles) {
  EXPECT_EQ(set_contig_key("chr1"), "1");
  EXPECT_EQ(set_contig_key("1"), "1");
  EXPECT_EQ(set_contig_key("CHR7"), "7");
  EXPECT_EQ(set_contig_key("Chr7"), "7");
  EXPECT_EQ(set_contig_key("chrM"), "MT");
  EXPECT_EQ(set_contig_key("M"), "MT");
  EXPECT_EQ(set_contig_key("chrMT"), "MT");
  EXPECT_EQ(set_contig_key("25"), "MT");
  EXPECT_EQ(set_contig_key("23"), "X");
  EXPECT_EQ(set_contig_key("chrX"), "X");
  EXPECT_EQ(set_contig_key("24"), "Y");
  EXPECT_EQ(set_contig_key("chr"), "chr");  // nothing left to keep: the name as it is
  EXPECT_EQ(set_contig_key("scaffold_12"), "scaffold_12");
}

// ---- BED ------------------------------------------------------------------------

TEST(VariantSets, BedIntervalsAreHalfOpenAndZeroBased) {
  // BED start 100, end 200 covers the 1-based positions 101..200 (UCSC BED
  // format definition: chromStart 0-based, chromEnd not included; common practice).
  const std::string path = write_file("half_open.bed", "chr1\t100\t200\tSRG1\n");
  const VariantSets sets = VariantSets::load(path);
  ASSERT_EQ(sets.size(), 1u);
  EXPECT_EQ(sets.format(), SetFileFormat::bed);
  const VariantSetDefinition& set = sets.set(0);
  EXPECT_EQ(set.contig_key, "1");
  EXPECT_EQ(set.start, 101);
  EXPECT_EQ(set.end, 200);
  ASSERT_EQ(set.intervals.size(), 1u);
  EXPECT_EQ(set.intervals[0].first, 101);
  EXPECT_EQ(set.intervals[0].last, 200);
  EXPECT_EQ(find_names(sets, "1", 100), Names{});
  EXPECT_EQ(find_names(sets, "1", 101), Names{"SRG1"});
  EXPECT_EQ(find_names(sets, "1", 200), Names{"SRG1"});
  EXPECT_EQ(find_names(sets, "1", 201), Names{});
  EXPECT_EQ(find_names(sets, "2", 150), Names{});
  std::vector<SetMembership> members;
  sets.find_sets("1", 150, ".", "A", "G", members);
  ASSERT_EQ(members.size(), 1u);
  EXPECT_TRUE(std::isnan(members[0].weight));
}

TEST(VariantSets, BedSetsSpanLinesAnywhereInTheFileAndTheirIntervalsMerge) {
  const std::string path = write_file("multi_line.bed",
                                      "track name=saltmarsh_ridge_genes\n"
                                      "browser position chr2:1-5000\n"
                                      "# chrom start end name\n"
                                      "\n"
                                      "chr2 900 1000 SRG2 0 +\n"           // line 5, spaces and extra columns
                                      "chr2\t500\t600\tSRG2\n"             // line 6
                                      "chr1\t5000\t6000\tSRG4\n"           // line 7
                                      "chr2\t550\t700\tSRG2\n"             // line 8: overlaps line 6
                                      "chr2\t700\t800\tSRG2\r\n"           // line 9: touches line 8 (CRLF)
                                      "chr2\t650\t1200\tSRG3\n"            // line 10
                                      "chr10\t10\t20\tSRG5\n"
                                      "chrX\t10\t20\tSRG6\n"
                                      "chrM\t10\t20\tSRG7\n"
                                      "chr9\t10\t20\tSRG8\n");
  const VariantSets sets = VariantSets::load(path);
  EXPECT_EQ(sets.summary().lines, 10u);
  EXPECT_EQ(sets.summary().sets, 7u);
  EXPECT_TRUE(sets.summary().warnings.empty());
  ASSERT_EQ(sets.size(), 7u);
  // Ordered by chromosome (1, 2, 9, 10, X, MT), then start.
  Names order;
  for (std::size_t set_index = 0; set_index < sets.size(); ++set_index) order.push_back(sets.set(set_index).name);
  EXPECT_EQ(order, (Names{"SRG4", "SRG2", "SRG3", "SRG8", "SRG5", "SRG6", "SRG7"}));

  const VariantSetDefinition& srg2 = sets.set(1);
  EXPECT_EQ(srg2.first_line, 5u);
  EXPECT_EQ(srg2.contig_key, "2");
  ASSERT_EQ(srg2.intervals.size(), 2u);
  EXPECT_EQ(srg2.intervals[0].first, 501);  // 500-600, 550-700 and 700-800 joined
  EXPECT_EQ(srg2.intervals[0].last, 800);
  EXPECT_EQ(srg2.intervals[1].first, 901);
  EXPECT_EQ(srg2.intervals[1].last, 1000);
  EXPECT_EQ(srg2.start, 501);
  EXPECT_EQ(srg2.end, 1000);

  // Overlapping sets, in set order; the gap inside SRG2 belongs to SRG3 only.
  EXPECT_EQ(find_names(sets, "2", 600), Names{"SRG2"});
  EXPECT_EQ(find_names(sets, "2", 651), (Names{"SRG2", "SRG3"}));
  EXPECT_EQ(find_names(sets, "2", 850), Names{"SRG3"});
  EXPECT_EQ(find_names(sets, "2", 950), (Names{"SRG2", "SRG3"}));
  EXPECT_EQ(find_names(sets, "2", 1001), Names{"SRG3"});
  EXPECT_EQ(find_names(sets, "2", 1201), Names{});
  EXPECT_EQ(find_names(sets, "MT", 15), Names{"SRG7"});
  EXPECT_EQ(find_names(sets, "X", 15), Names{"SRG6"});
  EXPECT_EQ(find_names(sets, set_contig_key("chr10"), 15), Names{"SRG5"});
}

TEST(VariantSets, CompressedFilesReadLikePlainOnes) {
  const std::string text =
      "chr3\t1204500\t1204600\tSRG11\n"
      "chr3\t1204700\t1204800\tSRG11\n"
      "chr3\t1204550\t1204750\tSRG12\n";
  const VariantSets plain = VariantSets::load(write_file("plain.bed", text));
  // Two gzip members, as in a BGZF file of two blocks.
  const VariantSets compressed = VariantSets::load(
      write_gzip_file("compressed.bed.gz", {text.substr(0, 30), text.substr(30)}));
  EXPECT_EQ(compressed.format(), SetFileFormat::bed);
  ASSERT_EQ(compressed.size(), plain.size());
  for (std::size_t set_index = 0; set_index < plain.size(); ++set_index) {
    EXPECT_EQ(compressed.set(set_index).name, plain.set(set_index).name);
    EXPECT_EQ(compressed.set(set_index).intervals.size(), plain.set(set_index).intervals.size());
  }
  for (std::int64_t position = 1204490; position < 1204810; ++position) {
    EXPECT_EQ(find_names(compressed, "3", position), find_names(plain, "3", position)) << position;
  }
  EXPECT_EQ(find_names(compressed, "3", 1204560), (Names{"SRG11", "SRG12"}));

  const VariantSets list = VariantSets::load(write_gzip_file("masks.txt.gz", {"SRG13\t3:1204511:C:T\t2\n"}));
  EXPECT_EQ(list.format(), SetFileFormat::list);
  EXPECT_EQ(find_names(list, "3", 1204511, ".", "C", "T"), Names{"SRG13"});
}

// ---- lists --------------------------------------------------------------------

TEST(VariantSets, ListsMatchAllelesAndIdsWithWeights) {
  const std::string path = write_file("masks.txt",
                                      "# set variant weight\n"
                                      "SRG21\tchr3:1204511:c:t\t0.5\n"         // line 2
                                      "SRG21  3:1204511:C:A  1.5\n"            // line 3: other ALT
                                      "SRG22\tsr_0007\n"                       // line 4: an ID, no weight
                                      "SRG21\t3:1209000:G:*\n"                 // line 5
                                      "SRG21\tsr_0001\t3\n"                    // line 6
                                      "SRG23\tsr_0001\t4\n"                    // line 7
                                      "SRG24\t3:1200000:A:G\t1\n"              // line 8
                                      "SRG24\tsr_0009\t7\n"                    // line 9
                                      "SRG25\tsr_0002\n");                     // line 10
  const VariantSets sets = VariantSets::load(path);
  EXPECT_EQ(sets.format(), SetFileFormat::list);
  EXPECT_EQ(sets.summary().lines, 9u);
  ASSERT_EQ(sets.size(), 5u);
  // Placed sets by start; ID-only sets last, in file order.
  EXPECT_EQ(sets.set(0).name, "SRG24");
  EXPECT_EQ(sets.set(1).name, "SRG21");
  EXPECT_EQ(sets.set(2).name, "SRG22");
  EXPECT_EQ(sets.set(3).name, "SRG23");
  EXPECT_EQ(sets.set(4).name, "SRG25");

  const VariantSetDefinition& srg21 = sets.set(1);
  EXPECT_EQ(srg21.contig_key, "3");
  EXPECT_EQ(srg21.start, 1204511);
  EXPECT_EQ(srg21.end, 1209000);
  EXPECT_EQ(srg21.first_line, 2u);
  ASSERT_EQ(srg21.entries.size(), 4u);
  EXPECT_EQ(srg21.entries[0].ref, "C");  // stored upper case
  EXPECT_EQ(srg21.entries[0].alt, "T");
  EXPECT_EQ(srg21.entries[0].weight, 0.5);
  EXPECT_EQ(srg21.entries[2].alt, "*");
  EXPECT_TRUE(std::isnan(srg21.entries[2].weight));
  EXPECT_EQ(srg21.entries[3].id, "sr_0001");
  EXPECT_EQ(srg21.entries[3].position, 0);
  EXPECT_TRUE(sets.set(2).contig_key.empty());
  EXPECT_EQ(sets.set(2).start, 0);

  std::vector<SetMembership> members;
  // By alleles, in any case; the other ALT at the same position is its own entry.
  sets.find_sets("3", 1204511, ".", "c", "t", members);
  ASSERT_EQ(members.size(), 1u);
  EXPECT_EQ(members[0].set_index, 1u);
  EXPECT_EQ(members[0].weight, 0.5);
  sets.find_sets("3", 1204511, ".", "C", "A", members);
  ASSERT_EQ(members.size(), 1u);
  EXPECT_EQ(members[0].weight, 1.5);
  sets.find_sets("3", 1204511, ".", "C", "G", members);
  EXPECT_TRUE(members.empty());
  sets.find_sets("chr3", 1204511, ".", "C", "T", members);  // callers pass the contig key
  EXPECT_TRUE(members.empty());

  // By ID, whole or one of a record's semicolon-separated IDs.
  sets.find_sets("5", 100, "sr_0001", "A", "G", members);
  ASSERT_EQ(members.size(), 2u);
  EXPECT_EQ(members[0].set_index, 1u);
  EXPECT_EQ(members[0].weight, 3.0);
  EXPECT_EQ(members[1].set_index, 3u);
  EXPECT_EQ(members[1].weight, 4.0);
  EXPECT_EQ(find_names(sets, "5", 100, "sr_0044;sr_0007"), Names{"SRG22"});
  EXPECT_EQ(find_names(sets, "5", 100, "sr_0002;sr_0001;sr_0002"), (Names{"SRG21", "SRG23", "SRG25"}));
  EXPECT_EQ(find_names(sets, "5", 100, "."), Names{});
  EXPECT_EQ(find_names(sets, "5", 100, ""), Names{});

  // A set that takes a variant by alleles and by ID lists it once, with the
  // allele entry's weight.
  sets.find_sets("3", 1200000, "sr_0009", "A", "G", members);
  ASSERT_EQ(members.size(), 1u);
  EXPECT_EQ(members[0].set_index, 0u);
  EXPECT_EQ(members[0].weight, 1.0);
}

TEST(VariantSets, ListSetsAboveTheLimitAreSkippedWithAWarning) {
  const std::string path = write_file("large.txt",
                                      "SRG31\t1:100:A:G\n"
                                      "SRG32\t1:200:A:G\n"
                                      "SRG31\t1:101:A:G\n"
                                      "SRG31\t1:102:A:G\n");
  SetFileOptions options;
  options.max_variants = 2;
  const VariantSets sets = VariantSets::load(path, options);
  ASSERT_EQ(sets.size(), 1u);
  EXPECT_EQ(sets.set(0).name, "SRG32");
  EXPECT_EQ(sets.summary().sets, 1u);
  EXPECT_EQ(sets.summary().skipped_too_large, 1u);
  ASSERT_EQ(sets.summary().warnings.size(), 1u);
  const std::string& warning = sets.summary().warnings[0];
  EXPECT_NE(warning.find("'SRG31'"), std::string::npos) << warning;
  EXPECT_NE(warning.find(path + ", line 1"), std::string::npos) << warning;
  EXPECT_NE(warning.find("3 variants"), std::string::npos) << warning;
  EXPECT_EQ(find_names(sets, "1", 100), Names{});
  EXPECT_EQ(find_names(sets, "1", 200), Names{"SRG32"});

  options.max_variants = 3;
  EXPECT_EQ(VariantSets::load(path, options).size(), 2u);
  options.max_variants = 0;
  const Error error = load_error(path, options);
  EXPECT_NE(error.problem().find("every set"), std::string::npos) << error.what();
}

// ---- errors -------------------------------------------------------------------

// The error for a file holding `text`: its place must be exactly `where`
// (the file name first) and its message must hold `problem`.
void expect_load_error(const std::string& name, const std::string& text, const std::string& where_after_path,
                       const std::string& problem) {
  const std::string path = write_file(name, text);
  const Error error = load_error(path);
  EXPECT_EQ(error.where(), path + where_after_path) << name;
  EXPECT_NE(error.problem().find(problem), std::string::npos) << name << ": " << error.what();
}

TEST(VariantSets, BedErrorsNameTheFileLineAndColumn) {
  expect_load_error("no_name.bed", "chr1\t100\t200\tSRG1\nchr1\t300\t400\n", ", line 2",
                    "BED for --sets needs the set name in column 4");
  expect_load_error("empty_interval.bed", "# header\nchr1\t100\t100\tSRG1\n", ", line 2, column 3",
                    "empty interval");
  expect_load_error("backwards.bed", "chr1\t200\t100\tSRG1\n", ", line 1, column 3", "end before its start");
  expect_load_error("start_text.bed", "chrom\tstart\tend\tname\n", ", line 1, column 2", "'start'");
  expect_load_error("negative.bed", "chr1\t-5\t100\tSRG1\n", ", line 1, column 2", "'-5'");
  expect_load_error("end_text.bed", "chr1\t5\t1e3\tSRG1\n", ", line 1, column 3", "'1e3'");
  expect_load_error("dot_name.bed", "chr1\t5\t10\t.\n", ", line 1, column 4", "set name");
  // One set on two chromosomes: both lines are named.
  const std::string path = write_file("two_chromosomes.bed",
                                      "chr1\t100\t200\tSRG1\nchr2\t100\t200\tSRG2\nchr2\t300\t400\tSRG1\n");
  const Error error = load_error(path);
  EXPECT_EQ(error.where(), path + ", line 3, column 1");
  EXPECT_NE(error.problem().find("'SRG1' is on chromosome 1 at line 1 and on chromosome 2 here"),
            std::string::npos)
      << error.what();
  // "chr1" and "1" are one chromosome.
  EXPECT_EQ(VariantSets::load(write_file("mixed_names.bed", "chr1\t1\t2\tSRG1\n1\t5\t9\tSRG1\n")).size(), 1u);
}

TEST(VariantSets, ListErrorsNameTheFileLineAndColumn) {
  for (const std::string weight : {"NA", "nan", "-1", "0", "inf", "2x", "weight"}) {
    expect_load_error("weight.txt", "SRG1\t1:100:A:G\t1\nSRG1\t1:101:A:G\t" + weight + "\n", ", line 2, column 3",
                      "'" + weight + "'");
  }
  for (const std::string variant : {"3:12a4:C:T", "3:1204511:C:Q", "3:0:C:T", "3:-4:C:T", ":1204511:C:T",
                                     "3:1204511::T", "3:+12:C:T"}) {
    expect_load_error("malformed.txt", "# masks\nSRG1\t" + variant + "\n", ", line 2, column 2",
                      "expected chr:pos:ref:alt");
  }
  expect_load_error("missing_id.txt", "SRG1\t.\n", ", line 1, column 2", "missing ID");
  expect_load_error("one_column.txt", "SRG1\n", ", line 1", "found 1 column");
  expect_load_error("four_columns.txt", "SRG1\t1:100:A:G\t1\textra\n", ", line 1", "found 4 columns");
  expect_load_error("dot_set.txt", "\t.\t1:100:A:G\n", ", line 1, column 1", "set name");

  const std::string twice = write_file("twice.txt", "SRG1\tchr1:100:a:g\nSRG2\t1:100:A:G\nSRG1\t1:100:A:G\n");
  Error error = load_error(twice);
  EXPECT_EQ(error.where(), twice + ", line 3, column 2");
  EXPECT_NE(error.problem().find("'1:100:A:G' a second time (first at line 1)"), std::string::npos)
      << error.what();
  expect_load_error("id_twice.txt", "SRG1\tsr_0001\nSRG1\tsr_0001\t2\n", ", line 2, column 2", "a second time");

  const std::string spread = write_file("spread.txt", "SRG1\tsr_0001\nSRG1\t1:100:A:G\nSRG1\t2:100:A:G\n");
  error = load_error(spread);
  EXPECT_EQ(error.where(), spread + ", line 3, column 2");
  EXPECT_NE(error.problem().find("on chromosome 1 at line 2 and on chromosome 2 here"), std::string::npos)
      << error.what();
}

TEST(VariantSets, FilesWithoutSetsAndUnreadableFilesAreErrors) {
  for (const std::string name : {"empty.bed", "empty.txt"}) {
    const std::string path = write_file(name, "");
    EXPECT_NE(load_error(path).problem().find("defines no set"), std::string::npos);
  }
  const std::string comments = write_file("comments.bed", "track name=x\n# nothing\n\n");
  EXPECT_EQ(load_error(comments).where(), comments);

  const std::string missing = temp_dir() + "/no_such_file.bed";
  EXPECT_EQ(load_error(missing).where(), missing);

  // A gzip file cut short: an error, not a file that seems to end early.
  std::string text;
  for (int line = 0; line < 2000; ++line) text += "chr1\t" + std::to_string(line * 10) + "\t" +
                                                  std::to_string(line * 10 + 5) + "\tSRG" + std::to_string(line) + "\n";
  const std::string whole = write_gzip_file("whole.bed.gz", {text});
  const std::string bytes = testing::read_text_file(whole);
  const std::string cut = write_file("cut.bed.gz", bytes.substr(0, bytes.size() / 2));
  const Error error = load_error(cut);
  EXPECT_EQ(error.where().rfind(cut + ", line ", 0), 0u) << error.what();
}

// ---- find_sets against a brute-force scan --------------------------------------

// Whether a set takes a variant, read straight off its definition; the
// weight is the allele entry's, else that of the first ID of the record the
// set lists (the whole ID column, then its parts in order).
bool set_takes(const VariantSetDefinition& set, const std::string& contig_key, std::int64_t position,
               const std::string& id, const std::string& ref, const std::string& alt, double& weight) {
  for (const SetInterval& interval : set.intervals) {
    if (set.contig_key == contig_key && interval.first <= position && position <= interval.last) return true;
  }
  for (const SetListEntry& entry : set.entries) {
    if (entry.position > 0 && entry.contig_key == contig_key && entry.position == position && entry.ref == ref &&
        entry.alt == alt) {
      weight = entry.weight;
      return true;
    }
  }
  std::vector<std::string> record_ids = {id};
  for (const std::string& part : testing::split_fields(id, ';')) record_ids.push_back(part);
  for (const std::string& record_id : record_ids) {
    for (const SetListEntry& entry : set.entries) {
      if (entry.position == 0 && entry.id == record_id) {
        weight = entry.weight;
        return true;
      }
    }
  }
  return false;
}

std::vector<SetMembership> brute_force(const VariantSets& sets, const std::string& contig_key,
                                       std::int64_t position, const std::string& id, const std::string& ref,
                                       const std::string& alt) {
  std::vector<SetMembership> members;
  for (std::uint32_t set_index = 0; set_index < sets.size(); ++set_index) {
    double weight = std::numeric_limits<double>::quiet_NaN();
    if (set_takes(sets.set(set_index), contig_key, position, id, ref, alt, weight)) {
      members.push_back({set_index, weight});
    }
  }
  return members;
}

void expect_same(const std::vector<SetMembership>& found, const std::vector<SetMembership>& expected,
                 const std::string& context) {
  ASSERT_EQ(found.size(), expected.size()) << context;
  for (std::size_t member = 0; member < found.size(); ++member) {
    EXPECT_EQ(found[member].set_index, expected[member].set_index) << context;
    EXPECT_TRUE(found[member].weight == expected[member].weight ||
                (std::isnan(found[member].weight) && std::isnan(expected[member].weight)))
        << context;
  }
}

TEST(VariantSets, BedLookupAgreesWithABruteForceScan) {
  std::mt19937_64 random(20240516);
  const std::vector<std::string> contigs = {"chr1", "2", "chrX", "chrM"};
  for (int round = 0; round < 5; ++round) {
    std::string text;
    const int set_count = 5 + static_cast<int>(random() % 60);
    for (int set = 0; set < set_count; ++set) {
      const std::string& contig = contigs[random() % contigs.size()];
      const int lines = 1 + static_cast<int>(random() % 4);
      for (int line = 0; line < lines; ++line) {
        const std::int64_t start = static_cast<std::int64_t>(random() % 2000);
        const std::uint64_t longest = random() % 2 ? 20 : 400;  // exons and whole regions
        const std::int64_t length = 1 + static_cast<std::int64_t>(random() % longest);
        text += contig + "\t" + std::to_string(start) + "\t" + std::to_string(start + length) + "\tSRG" +
                std::to_string(set) + "\n";
      }
    }
    // Lines shuffled: a set's lines are spread over the file.
    std::vector<std::string> lines = testing::lines_of(text);
    std::shuffle(lines.begin(), lines.end(), random);
    std::string shuffled;
    for (const std::string& line : lines) shuffled += line + "\n";
    const VariantSets sets = VariantSets::load(write_file("random.bed", shuffled));
    std::vector<SetMembership> found;
    for (const std::string contig : {"1", "2", "X", "MT", "7"}) {
      for (std::int64_t position = 0; position <= 2500; ++position) {
        sets.find_sets(contig, position, ".", "A", "G", found);
        expect_same(found, brute_force(sets, contig, position, ".", "A", "G"),
                    "round " + std::to_string(round) + " at " + contig + ":" + std::to_string(position));
        if (::testing::Test::HasFailure()) return;
      }
    }
  }
}

TEST(VariantSets, ListLookupAgreesWithABruteForceScan) {
  std::mt19937_64 random(7031);
  const std::vector<std::string> bases = {"A", "C", "G", "T"};
  std::string text;
  for (int set = 0; set < 40; ++set) {
    const std::string contig = std::to_string(1 + set % 3);
    std::vector<std::string> entries;
    const int count = 1 + static_cast<int>(random() % 12);
    for (int entry = 0; entry < count; ++entry) {
      std::string variant = random() % 3 ? contig + ":" + std::to_string(100 + random() % 30) + ":" +
                                               bases[random() % 4] + ":" + bases[random() % 4]
                                         : "sr_" + std::to_string(random() % 25);
      if (std::find(entries.begin(), entries.end(), variant) != entries.end()) continue;
      entries.push_back(variant);
      text += "SRG" + std::to_string(set) + "\t" + variant +
              (random() % 2 ? "\t" + std::to_string(1 + random() % 9) : std::string()) + "\n";
    }
  }
  const VariantSets sets = VariantSets::load(write_file("random.txt", text));
  std::vector<SetMembership> found;
  for (const std::string contig : {"1", "2", "3"}) {
    for (std::int64_t position = 99; position <= 131; ++position) {
      for (const std::string& ref : bases) {
        for (const std::string& alt : bases) {
          const std::string id = "sr_" + std::to_string(random() % 25) + ";sr_" + std::to_string(random() % 25);
          sets.find_sets(contig, position, id, ref, alt, found);
          expect_same(found, brute_force(sets, contig, position, id, ref, alt),
                      contig + ":" + std::to_string(position) + ":" + ref + ":" + alt + " " + id);
          if (::testing::Test::HasFailure()) return;
        }
      }
    }
  }
}

TEST(VariantSets, LookupsFromSeveralThreadsAgree) {
  std::string text;
  for (int set = 0; set < 300; ++set) {
    text += "chr4\t" + std::to_string(set * 37) + "\t" + std::to_string(set * 37 + 500) + "\tSRG" +
            std::to_string(set) + "\n";
  }
  const VariantSets sets = VariantSets::load(write_file("threads.bed", text));
  auto all_members = [&sets]() {
    std::vector<std::uint32_t> seen;
    std::vector<SetMembership> found;
    for (std::int64_t position = 1; position <= 12000; ++position) {
      sets.find_sets("4", position, ".", "A", "G", found);
      for (const SetMembership& member : found) seen.push_back(member.set_index);
    }
    return seen;
  };
  const std::vector<std::uint32_t> serial = all_members();
  std::vector<std::vector<std::uint32_t>> parallel(4);
  std::vector<std::thread> workers;
  for (auto& result : parallel) workers.emplace_back([&result, &all_members]() { result = all_members(); });
  for (std::thread& worker : workers) worker.join();
  for (const auto& result : parallel) EXPECT_EQ(result, serial);
}

}  // namespace
}  // namespace tamis
