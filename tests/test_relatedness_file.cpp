// The relatedness file: written rows read back, files made elsewhere, the
// parts of one matrix, and every malformed input the reader refuses.
#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <map>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/relatedness_file.hpp"

namespace tamis {
namespace {

using testing::make_temp_dir;
using testing::read_gzip_file;
using testing::run_command;
using testing::write_text_file;

class RelatednessFile : public ::testing::Test {
 protected:
  static void SetUpTestSuite() { dir_ = make_temp_dir("relatedness_file"); }
  static std::string path(const std::string& name) { return dir_ + "/" + name; }
  static std::string write(const std::string& name, const std::string& text) {
    write_text_file(path(name), text);
    return path(name);
  }
  static std::string dir_;
};
std::string RelatednessFile::dir_;

// The refusal of `paths`: its exit code and its message's place.
Error refusal_of(const std::vector<std::string>& paths) {
  try {
    read_relatedness_files(paths);
  } catch (const Error& error) {
    return error;
  }
  ADD_FAILURE() << "the files were accepted";
  return Error(ExitCode::success, "", "");
}

void expect_refused(const std::vector<std::string>& paths, const std::string& where, const std::string& problem) {
  const Error error = refusal_of(paths);
  EXPECT_EQ(error.code(), ExitCode::results_input);
  EXPECT_EQ(error.where(), where);
  EXPECT_NE(error.problem().find(problem), std::string::npos) << error.problem();
  EXPECT_FALSE(error.fix().empty());
}

double pair_value(const RelatednessFileContents& contents, const std::string& first, const std::string& second) {
  std::map<std::string, std::uint32_t> index;
  for (std::uint32_t id_idx = 0; id_idx < contents.sample_ids.size(); ++id_idx) index[contents.sample_ids[id_idx]] = id_idx;
  const std::uint32_t a = std::min(index.at(first), index.at(second)), b = std::max(index.at(first), index.at(second));
  for (const RelatednessPair& pair : contents.pairs) {
    if (pair.first == a && pair.second == b) return pair.value;
  }
  return 0.0;
}

TEST_F(RelatednessFile, WrittenRowsReadBackExactly) {
  const std::vector<std::string> ids = {"SR00001", "SR00002", "SR00003"};
  const std::vector<RelatednessEntry> entries = {{0, 0, 1.0123456789012344, 900},
                                                 {0, 2, 0.51234567890123456, 880},
                                                 {1, 1, 0.98, 901},
                                                 {1, 2, 0.07, 899},
                                                 {2, 2, 1.1, 905}};
  const std::string file = path("written.relatedness.tsv.gz");
  write_relatedness_file(file, ids, entries);
  EXPECT_EQ(read_gzip_file(file),
            "sample_1\tsample_2\trelatedness\tshared_markers\trelationship_degree\n"
            "SR00001\tSR00001\t1.0123456789012344\t900\tself\n"
            "SR00001\tSR00003\t0.5123456789012346\t880\tfirst_degree\n"
            "SR00002\tSR00002\t0.98\t901\tself\n"
            "SR00002\tSR00003\t0.07\t899\tbeyond_third\n"
            "SR00003\tSR00003\t1.1\t905\tself\n");
  const RelatednessFileContents contents = read_relatedness_files({file});
  EXPECT_EQ(contents.sample_ids, std::vector<std::string>({"SR00001", "SR00003", "SR00002"}));  // first seen
  EXPECT_EQ(contents.diagonal, std::vector<double>({1.0123456789012344, 1.1, 0.98}));
  EXPECT_EQ(pair_value(contents, "SR00003", "SR00001"), 0.51234567890123456);
  EXPECT_EQ(pair_value(contents, "SR00002", "SR00003"), 0.07);
  EXPECT_EQ(contents.checksum.size(), 32u);
}

TEST_F(RelatednessFile, AcceptsAPlainFileMadeElsewhere) {
  // A pedigree matrix typed by hand: extra columns, pairs in either order,
  // CRLF line ends, a zero left out, a sample without a diagonal row.
  const std::string file = write("pedigree.tsv",
                                 "sample_1\tsample_2\trelatedness\tnote\r\n"
                                 "mum\tmum\t1\tfounder\r\n"
                                 "kid\tmum\t0.5\tparent\r\n"
                                 "kid\tdad\t5e-1\tparent\r\n"
                                 "mum\tdad\t0\tunrelated\r\n");
  const RelatednessFileContents contents = read_relatedness_files({file});
  EXPECT_EQ(contents.sample_ids, std::vector<std::string>({"mum", "kid", "dad"}));
  EXPECT_EQ(contents.diagonal[0], 1.0);
  EXPECT_TRUE(std::isnan(contents.diagonal[1]));
  EXPECT_EQ(contents.pairs.size(), 2u);
  EXPECT_EQ(pair_value(contents, "mum", "kid"), 0.5);
  EXPECT_EQ(pair_value(contents, "dad", "kid"), 0.5);
}

TEST_F(RelatednessFile, ReadsGzipAndPlainAlike) {
  const std::string text = "sample_1\tsample_2\trelatedness\na\tb\t0.25\n";
  const std::string plain = write("plain.tsv", text);
  write("gzipped.tsv", text);
  ASSERT_EQ(run_command("gzip -f " + path("gzipped.tsv")), 0);
  const RelatednessFileContents from_plain = read_relatedness_files({plain});
  const RelatednessFileContents from_gzip = read_relatedness_files({path("gzipped.tsv.gz")});
  EXPECT_EQ(pair_value(from_gzip, "a", "b"), 0.25);
  EXPECT_EQ(from_plain.sample_ids, from_gzip.sample_ids);
}

TEST_F(RelatednessFile, RefusesMalformedFiles) {
  const std::string header = "sample_1\tsample_2\trelatedness\n";
  std::string file = write("empty.tsv", "");
  expect_refused({file}, file, "the file is empty");
  file = write("no_header.tsv", "a\tb\t0.5\n");
  expect_refused({file}, file + ", line 1", "header line");
  file = write("short.tsv", header + "a\tb\t0.5\na\tc\n");
  expect_refused({file}, file + ", line 3", "at least 3");
  file = write("empty_id.tsv", header + "a\t\t0.5\n");
  expect_refused({file}, file + ", line 2", "sample ID is empty");
  for (const std::string bad : {"NA", "0.5x", "nan", "inf", "", "0,5"}) {
    file = write("bad_number.tsv", header + "a\tb\t0.1\na\tc\t" + bad + "\n");
    expect_refused({file}, file + ", line 3", "is not a number");
  }
  file = write("twice.tsv", header + "a\tb\t0.5\nc\td\t0.2\na\tb\t0.5\n");
  expect_refused({file}, file + ", line 4", "listed twice");
  file = write("twice_reversed.tsv", header + "a\tb\t0.5\nb\ta\t0.5\n");
  expect_refused({file}, file + ", line 3", "listed twice");
  file = write("self_twice.tsv", header + "a\ta\t1.01\nb\tb\t1\na\ta\t1.01\n");
  expect_refused({file}, file + ", line 4", "with itself a second time");
  for (const std::string bad : {"0", "-0.2"}) {
    file = write("self_not_positive.tsv", header + "a\ta\t" + bad + "\n");
    expect_refused({file}, file + ", line 2", "not positive");
  }
}

TEST_F(RelatednessFile, RefusesAPairGivenInTwoFiles) {
  const std::string header = "sample_1\tsample_2\trelatedness\n";
  const std::string first = write("piece_a.tsv", header + "a\tb\t0.5\n");
  const std::string second = write("piece_b.tsv", header + "c\td\t0.5\nb\ta\t0.5\n");
  expect_refused({first, second}, second + ", line 3", "listed twice");
}

TEST_F(RelatednessFile, TakesEveryPartOfASetOnce) {
  const std::string header = "sample_1\tsample_2\trelatedness\n";
  const std::string one = write("set.relatedness.part1-of-3.tsv", header + "a\ta\t1\na\tb\t0.5\n");
  const std::string two = write("set.relatedness.part2-of-3.tsv", header + "b\tb\t1\n");
  const std::string three = write("set.relatedness.part3-of-3.tsv", header + "c\tc\t1\nb\tc\t0.25\n");
  const RelatednessFileContents contents = read_relatedness_files({three, one, two});
  EXPECT_EQ(contents.sample_ids.size(), 3u);
  EXPECT_EQ(contents.pairs.size(), 2u);
  // The same parts in another order make the same checksum.
  EXPECT_EQ(contents.checksum, read_relatedness_files({one, two, three}).checksum);

  expect_refused({one, three}, one, "part(s) 2 are not given");
  expect_refused({one, two, three, two}, two, "part 2 of 3 is given twice");
  const std::string other_set = write("other.relatedness.part2-of-4.tsv", header);
  expect_refused({one, other_set, three}, other_set, "parts of different sets");
}

TEST_F(RelatednessFile, SidecarsTieThePartsOfOneRun) {
  const std::vector<std::string> ids = {"a", "b"};
  RelatednessProvenance provenance;
  provenance.sample_count = 2;
  provenance.marker_count = 100;
  provenance.part_count = 2;
  provenance.fingerprint = "0123456789abcdef";
  // Names that say nothing: the sidecars tell the parts apart.
  const std::string first = path("run_a_first.tsv.gz"), second = path("run_a_second.tsv.gz");
  write_relatedness_file(first, ids, {{0, 0, 1.0, 100}, {0, 1, 0.5, 100}});
  provenance.part = 1;
  write_relatedness_sidecar(first, provenance);
  write_relatedness_file(second, ids, {{1, 1, 1.0, 100}});
  provenance.part = 2;
  write_relatedness_sidecar(second, provenance);
  EXPECT_EQ(read_relatedness_files({first, second}).pairs.size(), 1u);
  expect_refused({first}, first, "part(s) 2 are not given");

  const std::string stranger = path("run_b_second.tsv.gz");
  write_relatedness_file(stranger, ids, {{1, 1, 1.0, 100}});
  provenance.fingerprint = "fedcba9876543210";
  write_relatedness_sidecar(stranger, provenance);
  expect_refused({first, stranger}, stranger, "other inputs or options");

  // Two whole matrices are not one.
  provenance.part = provenance.part_count = 1;
  const std::string whole_a = path("whole_a.tsv.gz"), whole_b = path("whole_b.tsv.gz");
  write_relatedness_file(whole_a, ids, {{0, 0, 1.0, 100}});
  write_relatedness_sidecar(whole_a, provenance);
  write_relatedness_file(whole_b, ids, {{1, 1, 1.0, 100}});
  write_relatedness_sidecar(whole_b, provenance);
  expect_refused({whole_a, whole_b}, whole_b, "two whole matrices");

  // A part edited after it was written no longer matches its sidecar's md5.
  write_relatedness_file(second, ids, {{1, 1, 1.5, 100}});
  expect_refused({first, second}, second, "changed after tamis wrote it");
}

}  // namespace
}  // namespace tamis
