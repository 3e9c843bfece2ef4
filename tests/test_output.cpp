// Results writer: GWAS-SSF rows, BGZF files with tabix indexes, the temporary
// name discipline and the metadata sidecar.
#include <gtest/gtest.h>
#include <signal.h>
#include <sys/resource.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <cstdlib>
#include <sstream>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

using testing::capture_command;
using testing::file_exists;
using testing::make_temp_dir;
using testing::read_gzip_file;
using testing::read_text_file;

ResultRow make_score_only_row() {
  ResultRow row;
  row.chromosome = "2";
  row.position = 150;
  row.effect_allele = "T";
  row.other_allele = "C";
  row.beta = 0.125;
  row.standard_error = 0.0625;
  row.effect_allele_frequency = 0.25;
  row.log_p = std::log(0.5);
  row.variant_id = "2:150:C:T";
  row.n = 1000;
  row.test = "score";
  row.score_chisq = 4.0;
  row.score_log_p = std::log(0.5);
  row.mac = 500;
  row.call_rate = 1.0;
  return row;
}

std::vector<std::string> split_tabs(const std::string& line) {
  std::vector<std::string> fields;
  std::stringstream stream(line);
  std::string field;
  while (std::getline(stream, field, '\t')) fields.push_back(field);
  return fields;
}

// ---- rows ------------------------------------------------------------------

TEST(ResultRows, HeaderLineListsTheColumnsInOrder) {
  // The first eight names are the GWAS-SSF mandatory columns, in the order the
  // GWAS-SSF specification gives them (from memory of the GWAS-SSF v1.0 text).
  EXPECT_EQ(result_header_line(),
            "chromosome\tbase_pair_location\teffect_allele\tother_allele\tbeta\t"
            "standard_error\teffect_allele_frequency\tp_value\tvariant_id\trsid\tn\tinfo\t"
            "ref_allele\ttest\tneg_log_10_p_value\tscore_chisq\tscore_p\twald_chisq\twald_p\t"
            "lrt_chisq\tlrt_p\tlog10p_spread\tmac\tcall_rate\thwe_p\tn_cases\n");
  EXPECT_EQ(result_columns().size(), 26u);
}

TEST(ResultRows, EmptyOptionalsAreWrittenAsNA) {
  std::string line;
  append_result_row(make_score_only_row(), line);
  // "#NA" is the GWAS-SSF spelling of a missing value; ref_allele "OA" says the
  // other allele is the reference (GWAS-SSF v1.0, from memory).
  EXPECT_EQ(line,
            "2\t150\tT\tC\t0.125\t0.0625\t0.25\t0.5\t2:150:C:T\t#NA\t1000\t#NA\tOA\tscore\t"
            "0.301029996\t4\t0.5\t#NA\t#NA\t#NA\t#NA\t#NA\t500\t1\t#NA\t#NA\n");
}

TEST(ResultRows, FilledOptionalsAreWritten) {
  ResultRow row = make_score_only_row();
  row.rsid = "rs123";
  row.info = 0.875;
  row.test = "lrt";
  row.wald_chisq = 30.25;
  row.wald_log_p = std::log(1e-8);
  row.lrt_chisq = 31.5;
  row.lrt_log_p = std::log(2.5e-8);
  row.log_p = std::log(2.5e-8);
  row.log10p_spread = 0.39794;
  row.n_cases = 120;
  row.hwe_log_p = std::log(0.25);
  std::string line;
  append_result_row(row, line);
  std::vector<std::string> fields = split_tabs(line.substr(0, line.size() - 1));
  ASSERT_EQ(fields.size(), 26u);
  EXPECT_EQ(fields[7], "2.5e-08");
  EXPECT_EQ(fields[9], "rs123");
  EXPECT_EQ(fields[11], "0.875");
  EXPECT_EQ(fields[13], "lrt");
  // -log10(2.5e-8) = 8 - log10(2.5) = 7.60205999... (arithmetic).
  EXPECT_EQ(fields[14], "7.60205999");
  EXPECT_EQ(fields[17], "30.25");
  EXPECT_EQ(fields[18], "1e-08");
  EXPECT_EQ(fields[19], "31.5");
  EXPECT_EQ(fields[20], "2.5e-08");
  EXPECT_EQ(fields[21], "0.39794");
  EXPECT_EQ(fields[24], "0.25");
  EXPECT_EQ(fields[25], "120");
}

TEST(PValues, RepresentableValuesUseNineSignificantDigits) {
  EXPECT_EQ(format_p_value(0.0), "1");
  EXPECT_EQ(format_p_value(std::log(0.05)), "0.05");
  EXPECT_EQ(format_p_value(std::log(1e-300)), "1e-300");
  EXPECT_EQ(format_p_value(std::log(1.234567891e-20)), "1.23456789e-20");
}

TEST(PValues, PValueOfOneHasZeroNegativeLog10) {
  ResultRow row = make_score_only_row();
  row.log_p = 0.0;
  std::string line;
  append_result_row(row, line);
  EXPECT_EQ(split_tabs(line)[7], "1");
  EXPECT_EQ(split_tabs(line)[14], "0");  // -log10(1) = 0, not "-0"
}

TEST(PValues, TinyValuesComeFromTheLogarithm) {
  const double log_p = -2500.0;
  // p = 10^(log_p / ln 10): exponent floor(-1085.736...) = -1086 and mantissa
  // 10^0.26379... = 1.83597... (arithmetic on the formula, not a library).
  const double log10_p = log_p / std::log(10.0);
  const int expected_exponent = static_cast<int>(std::floor(log10_p));
  const double expected_mantissa = std::pow(10.0, log10_p - expected_exponent);
  ASSERT_EQ(expected_exponent, -1086);

  std::string text = format_p_value(log_p);
  std::size_t e_at = text.find('e');
  ASSERT_NE(e_at, std::string::npos) << text;
  EXPECT_EQ(text.substr(e_at), "e-1086");
  EXPECT_NEAR(std::stod(text.substr(0, e_at)), expected_mantissa, 1e-8);

  std::string line;
  ResultRow row = make_score_only_row();
  row.log_p = log_p;
  append_result_row(row, line);
  EXPECT_EQ(split_tabs(line)[14], "1085.7362");  // 2500 / ln 10, "%.9g"
}

TEST(PValues, MantissaRoundingRaisesTheExponent) {
  // log10 p just below -1000 gives a mantissa of 9.9999999998 that rounds to 10.
  const double log_p = (-1000.0 - 1e-11) * std::log(10.0);
  EXPECT_EQ(format_p_value(log_p), "1e-1000");
}

TEST(PValues, NeverZero) {
  for (double log_p = -1.0; log_p > -1e6; log_p *= 1.37) {
    std::string text = format_p_value(log_p);
    EXPECT_NE(text, "0") << log_p;
    EXPECT_GT(std::stod(text.substr(0, text.find('e'))), 0.0) << log_p;
  }
}

TEST(Chromosomes, MapToGwasSsfCodes) {
  // Codes from the GWAS-SSF specification: 1-22, X=23, Y=24, MT=25 (from memory
  // of the GWAS-SSF v1.0 text).
  EXPECT_EQ(map_chromosome_ssf("1"), "1");
  EXPECT_EQ(map_chromosome_ssf("chr1"), "1");
  EXPECT_EQ(map_chromosome_ssf("CHR22"), "22");
  EXPECT_EQ(map_chromosome_ssf("Chr7"), "7");
  EXPECT_EQ(map_chromosome_ssf("X"), "23");
  EXPECT_EQ(map_chromosome_ssf("chrX"), "23");
  EXPECT_EQ(map_chromosome_ssf("23"), "23");
  EXPECT_EQ(map_chromosome_ssf("Y"), "24");
  EXPECT_EQ(map_chromosome_ssf("chrY"), "24");
  EXPECT_EQ(map_chromosome_ssf("MT"), "25");
  EXPECT_EQ(map_chromosome_ssf("chrM"), "25");
  EXPECT_EQ(map_chromosome_ssf("M"), "25");
  EXPECT_EQ(map_chromosome_ssf("25"), "25");
  EXPECT_EQ(map_chromosome_ssf("0"), std::nullopt);
  EXPECT_EQ(map_chromosome_ssf("26"), std::nullopt);
  EXPECT_EQ(map_chromosome_ssf("01"), std::nullopt);
  EXPECT_EQ(map_chromosome_ssf("chrUn_gl000220"), std::nullopt);
  EXPECT_EQ(map_chromosome_ssf("1_random"), std::nullopt);
  EXPECT_EQ(map_chromosome_ssf("chr"), std::nullopt);
  EXPECT_EQ(map_chromosome_ssf(""), std::nullopt);
}

// ---- files -----------------------------------------------------------------

std::string make_three_chromosome_table(std::string* chromosome_two_hits) {
  std::string text = result_header_line();
  const std::pair<const char*, int> places[] = {{"1", 100}, {"1", 150}, {"2", 50}, {"2", 100},
                                                {"2", 180}, {"2", 200}, {"2", 201}, {"3", 150}};
  for (const auto& [chromosome, position] : places) {
    ResultRow row = make_score_only_row();
    row.chromosome = chromosome;
    row.position = position;
    row.variant_id = std::string(chromosome) + ":" + std::to_string(position) + ":C:T";
    std::string line;
    append_result_row(row, line);
    text += line;
    if (std::string(chromosome) == "2" && position >= 100 && position <= 200) {
      *chromosome_two_hits += line;
    }
  }
  return text;
}

TEST(BgzfFiles, CommittedFileIsIndexedAndQueryable) {
  const std::string dir = make_temp_dir("output_committed");
  const std::string path = dir + "/scan.tsv.gz";
  std::string expected_hits;
  const std::string table = make_three_chromosome_table(&expected_hits);
  {
    BgzfTextFile file(path);
    EXPECT_TRUE(file_exists(file.temporary_path()));
    EXPECT_FALSE(file_exists(path));
    file.write(table);
    file.commit(IndexKind::tabix_results);
  }
  EXPECT_TRUE(file_exists(path));
  EXPECT_TRUE(file_exists(path + ".tbi"));
  EXPECT_FALSE(file_exists(path + ".partial"));
  EXPECT_FALSE(file_exists(path + ".partial.tbi"));
  EXPECT_EQ(read_gzip_file(path), table);  // zlib gzread

  int status = -1;
  // Region query with tabix 1.16 (Debian): the rows on 2 from 100 to 200 inclusive.
  std::string hits = capture_command("tabix '" + path + "' 2:100-200", &status);
  EXPECT_EQ(status, 0);
  EXPECT_EQ(hits, expected_hits);
  // bgzip 1.16 -t accepts the file as intact BGZF.
  EXPECT_EQ(testing::run_command("bgzip -t '" + path + "'"), 0);
}

// Rows over three chromosomes, enough for many BGZF blocks.
std::string make_long_table() {
  std::string text = result_header_line();
  for (const char* chromosome : {"1", "2", "X"}) {
    for (std::int64_t position = 1000; position < 1000 + 4000 * 37; position += 37) {
      ResultRow row = make_score_only_row();
      row.chromosome = chromosome;
      row.position = position;
      std::string line;
      append_result_row(row, line);
      text += line;
    }
  }
  return text;
}

// The index built while rows are written against the one htslib 1.16 builds
// from the finished file (tbx_index_build3, which commit uses when text came
// through write()): the same bytes once inflated.
TEST(BgzfFiles, IndexBuiltWhileWritingEqualsTheOneBuiltFromTheFile) {
  const std::string dir = make_temp_dir("output_row_index");
  const std::string table = make_long_table();
  const std::size_t header_end = table.find('\n') + 1;
  const std::string as_rows = dir + "/rows.tsv.gz", as_text = dir + "/text.tsv.gz";
  {
    BgzfTextFile file(as_rows);
    file.write(table.substr(0, header_end));
    // Uneven pieces, as blocks of a scan arrive.
    for (std::size_t start = header_end, piece = 1; start < table.size(); piece = piece * 7 % 97 + 1) {
      std::size_t end = start;
      for (std::size_t line = 0; line < piece && end < table.size(); ++line) end = table.find('\n', end) + 1;
      file.write_rows(std::string_view(table).substr(start, end - start));
      start = end;
    }
    ASSERT_TRUE(file.indexes_rows());
    file.commit(IndexKind::tabix_results);
  }
  {
    BgzfTextFile file(as_text);
    file.write(table);
    ASSERT_FALSE(file.indexes_rows());
    file.commit(IndexKind::tabix_results);
  }
  EXPECT_EQ(read_gzip_file(as_rows), table);
  EXPECT_EQ(read_text_file(as_rows), read_text_file(as_text));
  const std::string built_while_writing = read_gzip_file(as_rows + ".tbi");
  EXPECT_GT(built_while_writing.size(), 100u);
  EXPECT_EQ(built_while_writing, read_gzip_file(as_text + ".tbi"));
  // tabix 1.16 (Debian) answers a query through it.
  int status = -1;
  const std::string hits = capture_command("tabix '" + as_rows + "' X:2000-2100 | cut -f1,2", &status);
  EXPECT_EQ(status, 0);
  EXPECT_EQ(hits, "X\t2036\nX\t2073\n");
}

// Text after rows, or rows that cannot be indexed, leave the index to commit.
TEST(BgzfFiles, RowsIndexOnlyWhileEveryRowIndexes) {
  const std::string dir = make_temp_dir("output_row_index_dropped");
  const std::string table = make_long_table();
  const std::size_t header_end = table.find('\n') + 1;
  BgzfTextFile text_after_rows(dir + "/a.tsv.gz");
  text_after_rows.write(table.substr(0, header_end));
  text_after_rows.write_rows(table.substr(header_end, 200000));
  EXPECT_TRUE(text_after_rows.indexes_rows());
  text_after_rows.write("# a note\n");
  EXPECT_FALSE(text_after_rows.indexes_rows());
  text_after_rows.write_rows("2\t5\tmore\n");
  EXPECT_FALSE(text_after_rows.indexes_rows());

  BgzfTextFile out_of_order(dir + "/b.tsv.gz");
  out_of_order.write_rows("1\t200\tx\n");
  out_of_order.write_rows("1\t100\tx\n1\t300\tx\n");  // a row goes in once the next one begins
  EXPECT_FALSE(out_of_order.indexes_rows());
  BgzfTextFile no_position(dir + "/c.tsv.gz");
  no_position.write_rows("1\tNA\tx\n");
  EXPECT_FALSE(no_position.indexes_rows());
}

TEST(BgzfFiles, VcfPresetIndexWorks) {
  const std::string dir = make_temp_dir("output_vcf_index");
  const std::string path = dir + "/sites.vcf.gz";
  const std::string header =
      "##fileformat=VCFv4.3\n##contig=<ID=1>\n#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\n";
  const std::string records = "1\t10\t.\tA\tG\t.\tPASS\t.\n1\t20\t.\tC\tT\t.\tPASS\t.\n";
  {
    BgzfTextFile file(path);
    file.write(header);
    file.write(records);
    file.commit(IndexKind::tabix_vcf);
  }
  // tabix 1.16 (Debian) reads the VCF-preset index.
  EXPECT_EQ(capture_command("tabix '" + path + "' 1:15-25"), "1\t20\t.\tC\tT\t.\tPASS\t.\n");
}

TEST(BgzfFiles, UncommittedFileLeavesNothing) {
  const std::string dir = make_temp_dir("output_uncommitted");
  const std::string path = dir + "/scan.tsv.gz";
  {
    BgzfTextFile file(path);
    file.write(result_header_line());
    EXPECT_TRUE(file_exists(path + ".partial"));
  }
  EXPECT_FALSE(file_exists(path));
  EXPECT_FALSE(file_exists(path + ".partial"));
  EXPECT_FALSE(file_exists(path + ".tbi"));
}

TEST(BgzfFiles, MissingDirectoryIsAnOutputError) {
  const std::string dir = make_temp_dir("output_missing_dir");
  try {
    BgzfTextFile file(dir + "/no/such/scan.tsv.gz");
    FAIL() << "expected an error";
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), ExitCode::output);
    EXPECT_NE(std::string(error.what()).find(dir + "/no/such/scan.tsv.gz"), std::string::npos);
    EXPECT_FALSE(error.fix().empty());
  }
}

TEST(BgzfFiles, RegisteredTemporariesCanBeRemoved) {
  const std::string dir = make_temp_dir("output_registry");
  BgzfTextFile bgzf(dir + "/a.tsv.gz");
  PlainTextFile plain(dir + "/b.txt");
  ASSERT_TRUE(file_exists(dir + "/a.tsv.gz.partial"));
  ASSERT_TRUE(file_exists(dir + "/b.txt.partial"));
  remove_registered_temporaries();  // what the signal handler calls
  EXPECT_FALSE(file_exists(dir + "/a.tsv.gz.partial"));
  EXPECT_FALSE(file_exists(dir + "/b.txt.partial"));
}

// Text that deflate cannot shrink much, so the file really grows.
std::string make_noisy_text(std::size_t length, unsigned seed) {
  std::string text(length, '0');
  const char digits[] = "0123456789abcdef";
  for (std::size_t char_idx = 0; char_idx < length; ++char_idx) {
    seed = seed * 1103515245u + 12345u;
    text[char_idx] = (char_idx % 80 == 79) ? '\n' : digits[(seed >> 16) & 15];
  }
  return text;
}

// Exit codes of the child in the full-disk test.
enum ChildOutcome { child_saw_output_error = 0, child_saw_no_error = 10,
                    child_saw_other_error = 11, child_left_partial = 12 };

TEST(OutputFiles, FullDiskIsAnOutputErrorAndLeavesNoFile) {
  const std::string dir = make_temp_dir("output_full_disk");
  const std::string path = dir + "/scan.tsv.gz";
  const std::string plain_path = dir + "/scan.log";
  pid_t child = fork();
  ASSERT_GE(child, 0);
  if (child == 0) {
    // A file-size limit stands in for a full disk (the shell's `ulimit -f`).
    signal(SIGXFSZ, SIG_IGN);
    rlimit limit{256 * 1024, 256 * 1024};
    setrlimit(RLIMIT_FSIZE, &limit);
    const std::string chunk = make_noisy_text(1 << 20, 7);
    int outcome = child_saw_no_error;
    try {
      BgzfTextFile file(path);
      for (int chunk_idx = 0; chunk_idx < 8; ++chunk_idx) file.write(chunk);
      file.commit(IndexKind::tabix_results);
    } catch (const Error& error) {
      outcome = error.code() == ExitCode::output ? child_saw_output_error : child_saw_other_error;
    } catch (...) {
      outcome = child_saw_other_error;
    }
    if (outcome == child_saw_output_error && access((path + ".partial").c_str(), F_OK) == 0) {
      outcome = child_left_partial;
    }
    if (outcome != child_saw_output_error) _exit(outcome);
    outcome = child_saw_no_error;
    try {
      PlainTextFile file(plain_path);
      file.write(chunk);
      file.commit();
    } catch (const Error& error) {
      outcome = error.code() == ExitCode::output ? child_saw_output_error : child_saw_other_error;
    } catch (...) {
      outcome = child_saw_other_error;
    }
    if (outcome == child_saw_output_error && access((plain_path + ".partial").c_str(), F_OK) == 0) {
      outcome = child_left_partial;
    }
    _exit(outcome);
  }
  int status = 0;
  ASSERT_EQ(waitpid(child, &status, 0), child);
  ASSERT_TRUE(WIFEXITED(status));
  EXPECT_EQ(WEXITSTATUS(status), child_saw_output_error);
  EXPECT_FALSE(file_exists(path));
  EXPECT_FALSE(file_exists(path + ".partial"));
  EXPECT_FALSE(file_exists(plain_path));
  EXPECT_FALSE(file_exists(plain_path + ".partial"));
}

TEST(PlainFiles, CommitRenamesAndUncommittedIsRemoved) {
  const std::string dir = make_temp_dir("output_plain");
  {
    PlainTextFile file(dir + "/log.txt");
    file.write("first line\n");
    file.write("second line\n");
    EXPECT_FALSE(file_exists(dir + "/log.txt"));
    file.commit();
  }
  EXPECT_EQ(read_text_file(dir + "/log.txt"), "first line\nsecond line\n");
  EXPECT_FALSE(file_exists(dir + "/log.txt.partial"));
  {
    PlainTextFile file(dir + "/abandoned.txt");
    file.write("never finished\n");
  }
  EXPECT_FALSE(file_exists(dir + "/abandoned.txt"));
  EXPECT_FALSE(file_exists(dir + "/abandoned.txt.partial"));
}

TEST(OutputPrefix, WritableDirectoryPassesAndOthersFail) {
  const std::string dir = make_temp_dir("output_prefix");
  EXPECT_NO_THROW(check_output_prefix_writable(dir + "/run1"));
  EXPECT_NO_THROW(check_output_prefix_writable(dir + "/"));
  testing::write_text_file(dir + "/plain_file", "x");
  for (const std::string& prefix : {dir + "/missing/run1", dir + "/plain_file/run1"}) {
    try {
      check_output_prefix_writable(prefix);
      ADD_FAILURE() << "expected an error for " << prefix;
    } catch (const Error& error) {
      EXPECT_EQ(error.code(), ExitCode::output);
      EXPECT_NE(std::string(error.what()).find(prefix), std::string::npos);
      EXPECT_FALSE(error.fix().empty());
    }
  }
  if (geteuid() != 0) {  // root may write anywhere
    testing::run_command("mkdir -p '" + dir + "/locked' && chmod 500 '" + dir + "/locked'");
    EXPECT_THROW(check_output_prefix_writable(dir + "/locked/run1"), Error);
    testing::run_command("chmod 700 '" + dir + "/locked'");
  }
}

std::string md5sum_of(const std::string& path) {
  // md5sum from GNU coreutils (Debian).
  return capture_command("md5sum '" + path + "' | cut -d' ' -f1 | tr -d '\\n'");
}

TEST(Checksums, Md5MatchesCoreutils) {
  const std::string dir = make_temp_dir("output_md5");
  testing::write_text_file(dir + "/empty", "");
  testing::write_text_file(dir + "/noise", make_noisy_text(300000, 3));
  // The md5 of no bytes is d41d8cd98f00b204e9800998ecf8427e (RFC 1321 test suite).
  EXPECT_EQ(md5_hex_of_file(dir + "/empty"), "d41d8cd98f00b204e9800998ecf8427e");
  EXPECT_EQ(md5_hex_of_file(dir + "/noise"), md5sum_of(dir + "/noise"));
  EXPECT_THROW(md5_hex_of_file(dir + "/absent"), Error);
}

TEST(Sidecar, HoldsTheGwasSsfKeysAndTheDataChecksum) {
  const std::string dir = make_temp_dir("output_sidecar");
  const std::string path = dir + "/height.tsv.gz";
  std::string unused;
  {
    BgzfTextFile file(path);
    file.write(make_three_chromosome_table(&unused));
    file.commit(IndexKind::tabix_results);
  }
  SidecarFields fields;
  fields.data_file_name = "height.tsv.gz";
  fields.genome_assembly = "GRCh38";
  fields.trait_description = "standing height: \"adult\"";
  fields.sample_size = 1000;
  fields.case_count = 300;
  fields.control_count = 700;
  fields.software_version = "0.1.0";
  fields.adjusted_covariates = {"age", "sex", "PC1"};
  fields.extra = {{"shard", "3/10"}, {"note", "a: b # c"}};
  write_metadata_sidecar(path, fields);

  const std::string meta_path = path + "-meta.yaml";
  ASSERT_TRUE(file_exists(meta_path));
  EXPECT_FALSE(file_exists(meta_path + ".partial"));
  const std::string text = read_text_file(meta_path);
  std::vector<std::string> lines;
  std::stringstream stream(text);
  for (std::string line; std::getline(stream, line);) lines.push_back(line);
  auto has_line = [&](const std::string& wanted) {
    for (const std::string& line : lines) {
      if (line == wanted) return true;
    }
    return false;
  };
  // Key names and nesting from the GWAS-SSF metadata schema
  // (schema/metadata-yamale-schema.yaml in the GWAS Catalog's
  // gwas-summary-statistics-standard repository).
  EXPECT_TRUE(has_line("data_file_name: \"height.tsv.gz\""));
  EXPECT_TRUE(has_line("file_type: \"GWAS-SSF v1.1\""));
  EXPECT_TRUE(has_line("data_file_md5sum: \"" + md5sum_of(path) + "\""));
  EXPECT_TRUE(has_line("genome_assembly: \"GRCh38\""));
  EXPECT_TRUE(has_line("coordinate_system: 1-based"));
  EXPECT_TRUE(has_line("is_harmonised: false"));
  EXPECT_TRUE(has_line("is_sorted: true"));
  EXPECT_TRUE(has_line("analysis_software: \"tamis 0.1.0\""));
  EXPECT_TRUE(has_line("adjusted_covariates:"));
  EXPECT_TRUE(has_line("  - \"PC1\""));
  EXPECT_TRUE(has_line("trait_description:"));
  EXPECT_TRUE(has_line("  - \"standing height: \\\"adult\\\"\""));
  EXPECT_TRUE(has_line("samples:"));
  EXPECT_TRUE(has_line("  - sample_size: 1000"));
  EXPECT_TRUE(has_line("    case_control_study: true"));
  EXPECT_TRUE(has_line("    case_count: 300"));
  EXPECT_TRUE(has_line("    control_count: 700"));
  EXPECT_TRUE(has_line("shard: 3/10"));
  EXPECT_TRUE(has_line("note: \"a: b # c\""));
}

TEST(Sidecar, QuantitativeTraitHasNoCaseCounts) {
  const std::string dir = make_temp_dir("output_sidecar_quantitative");
  const std::string path = dir + "/bmi.tsv.gz";
  {
    BgzfTextFile file(path);
    file.write(result_header_line());
    file.commit(IndexKind::tabix_results);
  }
  SidecarFields fields;
  fields.trait_description = "body mass index";
  fields.sample_size = 50;
  write_metadata_sidecar(path, fields);
  const std::string text = read_text_file(path + "-meta.yaml");
  EXPECT_NE(text.find("data_file_name: \"bmi.tsv.gz\"\n"), std::string::npos);
  EXPECT_NE(text.find("genome_assembly: \"unknown\"\n"), std::string::npos);
  EXPECT_NE(text.find("adjusted_covariates: []\n"), std::string::npos);
  EXPECT_EQ(text.find("case_count"), std::string::npos);
  EXPECT_EQ(text.find("control_count"), std::string::npos);
}

}  // namespace
}  // namespace tamis
