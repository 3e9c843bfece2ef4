// End-to-end checks of `tamis simulate` + `tamis scan` through the executable.
#include <gtest/gtest.h>

#include <cmath>
#include <map>
#include <sstream>
#include <vector>

#include "support/test_support.hpp"

namespace tamis::testing {
namespace {

// The sidecar names its data file, which differs between the two runs.
std::string without_file_name(const std::string& yaml) {
  std::string kept;
  for (const std::string& line : lines_of(yaml)) {
    if (line.rfind("data_file_name", 0) != 0 && line.rfind("#", 0) != 0) kept += line + "\n";
  }
  return kept;
}

const std::string kCovariates = "age,sex,village,pc1,pc2,pc3,pc4";

class EndToEnd : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("end_to_end");
    const std::string command = tamis_binary() + " simulate --out " + dir_ +
                                "/cohort --samples 1000 --variants 400 --seed 5 2>/dev/null";
    ASSERT_EQ(run_command(command), 0);
  }

  static std::string scan_command(const std::string& prefix, int threads, const std::string& extra = "") {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates " + kCovariates +
           " --out " + prefix + " --threads " + std::to_string(threads) + " --quiet " + extra;
  }

  static std::string dir_;
};
std::string EndToEnd::dir_;

TEST_F(EndToEnd, OutputsAreByteIdenticalAtOneAndFourThreads) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/one", 1)), 0);
  ASSERT_EQ(run_command(scan_command(dir_ + "/four", 4)), 0);
  for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
    for (const std::string suffix : {".tsv.gz", ".tsv.gz.tbi"}) {
      const std::string one = read_text_file(dir_ + "/one." + trait + suffix);
      const std::string four = read_text_file(dir_ + "/four." + trait + suffix);
      EXPECT_FALSE(one.empty());
      EXPECT_TRUE(one == four) << trait << suffix << " differs between 1 and 4 threads";
    }
    EXPECT_EQ(without_file_name(read_text_file(dir_ + "/one." + trait + ".tsv.gz-meta.yaml")),
              without_file_name(read_text_file(dir_ + "/four." + trait + ".tsv.gz-meta.yaml")));
  }
}

// The score kernel has one register blocking per instruction set, chosen at
// run time; shards of one scan may run on different cluster nodes, so every
// blocking must give the same bytes as the widest this machine runs.
TEST_F(EndToEnd, OutputsAreByteIdenticalWhateverTheKernelInstructionSet) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/widest", 2)), 0);
  for (const std::string isa : {"baseline", "avx2"}) {
    ASSERT_EQ(run_command("TAMIS_KERNEL_ISA=" + isa + " " + scan_command(dir_ + "/" + isa, 2)), 0);
    for (const std::string trait : {"fev1_litres", "winter_wheeze"}) {
      EXPECT_TRUE(read_gzip_file(dir_ + "/" + isa + "." + trait + ".tsv.gz") ==
                  read_gzip_file(dir_ + "/widest." + trait + ".tsv.gz"))
          << trait << ": the " << isa << " kernel differs";
    }
  }
}

// GWAS-SSF v1.1: the eight mandatory columns come first, in this order, and
// each has the type the standard gives it (GWAS Catalog summary-statistics
// format specification).
TEST_F(EndToEnd, ResultsPassTheGwasSsfColumnCheck) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/ssf", 2)), 0);
  const std::vector<std::string> lines = lines_of(read_gzip_file(dir_ + "/ssf.fev1_litres.tsv.gz"));
  ASSERT_GT(lines.size(), 100u);
  const std::vector<std::string> header = split_fields(lines[0], '\t');
  const std::vector<std::string> mandatory = {"chromosome", "base_pair_location", "effect_allele", "other_allele",
                                              "beta", "standard_error", "effect_allele_frequency", "p_value"};
  ASSERT_GE(header.size(), mandatory.size());
  for (std::size_t column_idx = 0; column_idx < mandatory.size(); ++column_idx) {
    EXPECT_EQ(header[column_idx], mandatory[column_idx]);
  }
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    const std::vector<std::string> fields = split_fields(lines[line_idx], '\t');
    ASSERT_EQ(fields.size(), header.size()) << lines[line_idx];
    const int chromosome = std::stoi(fields[0]);
    EXPECT_TRUE(chromosome >= 1 && chromosome <= 25);
    EXPECT_GT(std::stoll(fields[1]), 0);
    EXPECT_NE(fields[2].find_first_of("ACGT"), std::string::npos);
    const double p = std::stod(fields[7]);
    EXPECT_GT(p, 0.0);
    EXPECT_LE(p, 1.0);
    const double frequency = std::stod(fields[6]);
    EXPECT_GE(frequency, 0.0);
    EXPECT_LE(frequency, 1.0);
    EXPECT_GT(std::stod(fields[5]), 0.0);
    EXPECT_EQ(fields[8], fields[0] + "_" + fields[1] + "_" + fields[3] + "_" + fields[2]);
  }
  const std::string yaml = read_text_file(dir_ + "/ssf.fev1_litres.tsv.gz-meta.yaml");
  for (const std::string key : {"data_file_name", "file_type", "data_file_md5sum", "genome_assembly",
                                "coordinate_system", "trait_description", "sample_size", "analysis_software",
                                "adjusted_covariates", "is_sorted", "is_harmonised"}) {
    EXPECT_NE(yaml.find(key + ":"), std::string::npos) << key;
  }
  const std::string md5 = capture_command("md5sum " + dir_ + "/ssf.fev1_litres.tsv.gz | cut -c1-32");
  EXPECT_NE(yaml.find(md5.substr(0, 32)), std::string::npos) << "md5 in the sidecar matches md5sum (coreutils)";
}

// tabix 1.16 answers region queries on the results file (common practice for
// indexed summary statistics).
TEST_F(EndToEnd, TabixAnswersRegionQueries) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/tbx", 2)), 0);
  const std::string path = dir_ + "/tbx.winter_wheeze.tsv.gz";
  const std::vector<std::string> all = lines_of(read_gzip_file(path));
  std::vector<std::string> expected;
  for (std::size_t line_idx = 1; line_idx < all.size(); ++line_idx) {
    const std::vector<std::string> fields = split_fields(all[line_idx], '\t');
    const long long position = std::stoll(fields[1]);
    if (fields[0] == "2" && position >= 50000 && position <= 150000) expected.push_back(all[line_idx]);
  }
  ASSERT_FALSE(expected.empty());
  int code = 0;
  const std::vector<std::string> answered = lines_of(capture_command("tabix " + path + " 2:50000-150000", &code));
  EXPECT_EQ(code, 0);
  EXPECT_EQ(answered, expected);
}

TEST_F(EndToEnd, PlantedEffectsAreFoundAndConfirmed) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/planted", 2)), 0);
  const std::vector<std::string> truth = lines_of(read_text_file(dir_ + "/cohort.truth.tsv"));
  const std::vector<std::string> rows = lines_of(read_gzip_file(dir_ + "/planted.fev1_litres.tsv.gz"));
  std::map<std::string, std::vector<std::string>> by_position;
  for (std::size_t line_idx = 1; line_idx < rows.size(); ++line_idx) {
    std::vector<std::string> fields = split_fields(rows[line_idx], '\t');
    by_position[fields[0] + ":" + fields[1]] = fields;
  }
  int found = 0;
  for (std::size_t line_idx = 1; line_idx < truth.size(); ++line_idx) {
    const std::vector<std::string> fields = split_fields(truth[line_idx], '\t');
    if (fields[0] != "fev1_litres") continue;
    auto row = by_position.find(fields[1] + ":" + fields[2]);
    ASSERT_NE(row, by_position.end());
    if (row->second[13] == "lrt") ++found;
  }
  EXPECT_GE(found, 4) << "most planted effects pass the 1e-4 screen at n = 1000";
}

TEST_F(EndToEnd, EveryVariantConfirmedWhenThresholdIsOne) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/all", 2, "--confirm-below 1")), 0);
  const std::vector<std::string> rows = lines_of(read_gzip_file(dir_ + "/all.winter_wheeze.tsv.gz"));
  for (std::size_t line_idx = 1; line_idx < rows.size(); ++line_idx) {
    const std::vector<std::string> fields = split_fields(rows[line_idx], '\t');
    EXPECT_TRUE(fields[13] == "lrt" || fields[13] == "firth_lrt") << fields[13];
    EXPECT_NE(fields[17], "#NA");
    EXPECT_NE(fields[19], "#NA");
    EXPECT_NE(fields[25], "#NA") << "n_cases is filled for a binary trait";
  }
}

TEST_F(EndToEnd, LogRecordsTheRun) {
  ASSERT_EQ(run_command(scan_command(dir_ + "/logged", 2)), 0);
  const std::string log = read_text_file(dir_ + "/logged.log");
  for (const std::string expected : {"command:", "version: tamis", "samples:", "analysis samples",
                                     "null model fev1_litres", "IRLS iterations", "monomorphic", "wall time"}) {
    EXPECT_NE(log.find(expected), std::string::npos) << expected;
  }
}

TEST_F(EndToEnd, UnwritableOutputIsRefusedBeforeReadingInput) {
  int code = 0;
  capture_command(tamis_binary() + " scan --genotypes /nonexistent.vcf.gz --traits /nonexistent.tsv --trait x" +
                      " --out /nonexistent_dir/prefix 2>&1",
                  &code);
  EXPECT_EQ(code, 6) << "output errors exit with code 6 (README exit-code table)";
}

TEST_F(EndToEnd, VersionIsPrinted) {
  int code = 0;
  const std::string text = capture_command(tamis_binary() + " --version", &code);
  EXPECT_EQ(code, 0);
  EXPECT_EQ(text.rfind("tamis ", 0), 0u);
}

}  // namespace
}  // namespace tamis::testing
