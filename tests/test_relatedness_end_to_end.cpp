// `tamis relatedness` through the executable: threads and parts change no
// byte, options are checked before any input is read, marker choice (floors,
// thinning), bad input, and relatives in a simulated pedigree.
#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <map>
#include <set>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/relatedness_file.hpp"

namespace tamis::testing {
namespace {

class RelatednessEndToEnd : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("relatedness_end_to_end");
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ +
                          "/cohort --samples 900 --variants 2500 --families 0.5 --seed 17 2>/dev/null"),
              0);
  }

  // Runs `tamis relatedness` on the cohort; returns the exit code.
  static int relatedness(const std::string& prefix, const std::string& extra) {
    return run_command(tamis_binary() + " relatedness --genotypes " + dir_ + "/cohort.vcf.gz --out " + dir_ + "/" +
                       prefix + " --quiet " + extra + " 2>" + dir_ + "/" + prefix + ".stderr");
  }
  static std::string file(const std::string& name) { return dir_ + "/" + name; }

  static std::string dir_;
};
std::string RelatednessEndToEnd::dir_;

// The sidecar names its data file, which differs between runs.
std::string without_file_name(const std::string& yaml) {
  std::string kept;
  for (const std::string& line : lines_of(yaml)) {
    if (line.rfind("data_file_name", 0) != 0 && line.rfind("#", 0) != 0) kept += line + "\n";
  }
  return kept;
}

std::string sidecar_value(const std::string& yaml, const std::string& key) {
  for (const std::string& line : lines_of(yaml)) {
    if (line.rfind(key + ": ", 0) == 0) return line.substr(key.size() + 2);
  }
  return "";
}

std::multiset<std::string> data_lines(const std::vector<std::string>& paths) {
  std::multiset<std::string> lines;
  for (const std::string& path : paths) {
    const std::vector<std::string> file_lines = lines_of(read_gzip_file(path));
    EXPECT_FALSE(file_lines.empty()) << path;
    if (!file_lines.empty()) {
      EXPECT_EQ(file_lines[0], "sample_1\tsample_2\trelatedness\tshared_markers\trelationship_degree");
    }
    lines.insert(file_lines.begin() + (file_lines.empty() ? 0 : 1), file_lines.end());
  }
  return lines;
}

TEST_F(RelatednessEndToEnd, OutputsAreByteIdenticalAtOneAndFourThreads) {
  ASSERT_EQ(relatedness("one", "--threads 1"), 0);
  ASSERT_EQ(relatedness("four", "--threads 4"), 0);
  const std::string one = read_text_file(file("one.relatedness.tsv.gz"));
  EXPECT_GT(one.size(), 1000u);
  EXPECT_TRUE(one == read_text_file(file("four.relatedness.tsv.gz")));
  EXPECT_EQ(without_file_name(read_text_file(file("one.relatedness.tsv.gz-meta.yaml"))),
            without_file_name(read_text_file(file("four.relatedness.tsv.gz-meta.yaml"))));
  EXPECT_EQ(sidecar_value(read_text_file(file("one.relatedness.tsv.gz-meta.yaml")), "tamis_relatedness_samples"),
            "900");
  EXPECT_TRUE(file_exists(file("one.log")));
}

TEST_F(RelatednessEndToEnd, PartsTogetherAreTheWholeMatrix) {
  ASSERT_EQ(relatedness("whole", "--threads 2"), 0);
  std::vector<std::string> parts;
  std::set<std::string> fingerprints;
  for (int part = 1; part <= 4; ++part) {
    const std::string k_of_n = std::to_string(part) + "-of-4";
    ASSERT_EQ(relatedness("split", "--threads 2 --part " + std::to_string(part) + "/4"), 0);
    parts.push_back(file("split.relatedness.part" + k_of_n + ".tsv.gz"));
    EXPECT_TRUE(file_exists(file("split.part" + k_of_n + ".log")));
    const std::string yaml = read_text_file(parts.back() + "-meta.yaml");
    EXPECT_EQ(sidecar_value(yaml, "tamis_relatedness_part"), std::to_string(part) + "/4");
    fingerprints.insert(sidecar_value(yaml, "tamis_run_fingerprint"));
  }
  EXPECT_EQ(fingerprints.size(), 1u);
  EXPECT_EQ(data_lines(parts), data_lines({file("whole.relatedness.tsv.gz")}));

  const RelatednessFileContents whole = read_relatedness_files({file("whole.relatedness.tsv.gz")});
  const RelatednessFileContents joined = read_relatedness_files({parts[2], parts[0], parts[3], parts[1]});
  EXPECT_EQ(joined.sample_ids.size(), 900u);
  EXPECT_EQ(joined.pairs.size(), whole.pairs.size());

  // A part from a run with other options does not join the set.
  ASSERT_EQ(relatedness("other", "--threads 2 --maf-floor 0.05 --part 2/4"), 0);
  try {
    read_relatedness_files({parts[0], file("other.relatedness.part2-of-4.tsv.gz"), parts[2], parts[3]});
    ADD_FAILURE() << "a part of another run was accepted";
  } catch (const Error& error) {
    EXPECT_NE(error.problem().find("other inputs or options"), std::string::npos) << error.what();
  }
}

TEST_F(RelatednessEndToEnd, OptionsAreCheckedBeforeAnyInputIsRead) {
  const std::string empty_dir = make_temp_dir("relatedness_options");
  const std::vector<std::string> refused = {"--part 0/3",         "--part 4/3",        "--part 2",
                                            "--thin-kb -1",       "--keep-above nan",  "--maf-floor 1.5",
                                            "--call-rate-floor -0.1", "--threads -1",  "--haploid-dosage 3",
                                            "--dosage-from XY",   "--region chr1:9-3", "--keep-samples /no/such/list"};
  for (const std::string& options : refused) {
    const int code = run_command(tamis_binary() + " relatedness --genotypes " + dir_ + "/cohort.vcf.gz --out " +
                                 empty_dir + "/run " + options + " 2>/dev/null");
    EXPECT_EQ(code, static_cast<int>(ExitCode::usage)) << options;
  }
  EXPECT_EQ(run_command(tamis_binary() + " relatedness --genotypes /no/such.vcf.gz --out " + empty_dir +
                        "/run 2>/dev/null"),
            static_cast<int>(ExitCode::usage));
  EXPECT_EQ(capture_command("ls -A " + empty_dir), "");
}

// Greedy thinning in file order over the biallelic records, read straight
// from the VCF text: every marker passes floors of 0.
TEST_F(RelatednessEndToEnd, ThinningKeepsMarkersApart) {
  ASSERT_EQ(relatedness("thin", "--thin-kb 300 --maf-floor 0 --call-rate-floor 0 --threads 2"), 0);
  std::uint64_t used = 0, thinned = 0;
  std::string last_contig;
  long long last_position = 0;
  for (const std::string& line : lines_of(read_gzip_file(file("cohort.vcf.gz")))) {
    if (line.empty() || line[0] == '#') continue;
    const std::vector<std::string> fields = split_fields(line);
    if (fields[4].find(',') != std::string::npos || fields[4] == ".") continue;
    const long long position = std::stoll(fields[1]);
    if (fields[0] == last_contig && position - last_position < 300000) {
      ++thinned;
      continue;
    }
    ++used;
    last_contig = fields[0];
    last_position = position;
  }
  ASSERT_GT(thinned, 0u);
  const std::string log = read_text_file(file("thin.log"));
  EXPECT_NE(log.find(std::to_string(used) + " markers used"), std::string::npos) << log;
  EXPECT_NE(log.find(std::to_string(thinned) + " thinned out by distance"), std::string::npos) << log;
}

// The info floor, recomputed from the VCF's DS text: r^2 = var(DS) /
// (2p(1 - p)) over the samples with a value (DS read as htslib reads a
// Float), taken after the minor allele frequency floor, as in the scan.
TEST_F(RelatednessEndToEnd, InfoAndHardyWeinbergFloorsTakeMarkersOut) {
  ASSERT_EQ(relatedness("floors", "--info-floor 0.9 --hwe-floor 1e-3 --threads 2"), 0);
  std::uint64_t below_info = 0;
  for (const std::string& line : lines_of(read_gzip_file(file("cohort.vcf.gz")))) {
    if (line.empty() || line[0] == '#') continue;
    const std::vector<std::string> fields = split_fields(line);
    if (fields[4].find(',') != std::string::npos) continue;
    double called = 0.0, sum = 0.0, squares = 0.0;
    for (std::size_t column = 9; column < fields.size(); ++column) {
      const std::string ds = fields[column].substr(fields[column].find(':') + 1);
      if (ds == ".") continue;
      const double value = static_cast<float>(std::strtod(ds.c_str(), nullptr));
      called += 1.0;
      sum += value;
      squares += value * value;
    }
    const double p = sum / (2.0 * called);
    if (std::min(p, 1.0 - p) < 0.01) continue;
    const double mean = sum / called;
    if (std::max(0.0, squares / called - mean * mean) / (2.0 * p * (1.0 - p)) < 0.9) ++below_info;
  }
  ASSERT_GT(below_info, 0u);
  const std::string log = read_text_file(file("floors.log"));
  EXPECT_NE(log.find(std::to_string(below_info) + " below the info floor"), std::string::npos) << log;
  EXPECT_NE(log.find("below the Hardy-Weinberg p floor"), std::string::npos) << log;
}

TEST_F(RelatednessEndToEnd, NoMarkerLeftIsAnErrorAndNothingIsWritten) {
  EXPECT_EQ(relatedness("nothing", "--region 9"), static_cast<int>(ExitCode::genotype_input));
  EXPECT_NE(read_text_file(file("nothing.stderr")).find("no marker is left"), std::string::npos);
  EXPECT_FALSE(file_exists(file("nothing.relatedness.tsv.gz")));
}

TEST_F(RelatednessEndToEnd, KeepSamplesGivesTheMatrixOfThoseSamples) {
  std::string list;
  for (int sample = 1; sample <= 40; ++sample) {
    char id[16];
    std::snprintf(id, sizeof id, "SR%05d", sample * 7);
    list += std::string(id) + "\n";
  }
  write_text_file(file("forty.txt"), list);
  ASSERT_EQ(relatedness("forty", "--keep-samples " + file("forty.txt") + " --keep-above -10 --threads 2"), 0);
  const RelatednessFileContents contents = read_relatedness_files({file("forty.relatedness.tsv.gz")});
  EXPECT_EQ(contents.sample_ids.size(), 40u);
  EXPECT_EQ(lines_of(read_gzip_file(file("forty.relatedness.tsv.gz"))).size(), 1u + 40u * 41u / 2u);
  const std::vector<std::string> listed = lines_of(list);
  EXPECT_EQ(std::set<std::string>(contents.sample_ids.begin(), contents.sample_ids.end()),
            std::set<std::string>(listed.begin(), listed.end()));
}

TEST_F(RelatednessEndToEnd, ASampleWithoutCallsIsNamedAndNothingIsWritten) {
  std::string vcf =
      "##fileformat=VCFv4.2\n##contig=<ID=1>\n"
      "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n"
      "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT\tann\tbea\tghost\tdee\n";
  const char* calls[] = {"0/1\t1/1\t./.\t0/0", "0/0\t0/1\t./.\t1/1", "1/1\t0/1\t./.\t0/1"};
  for (int record = 0; record < 3; ++record) {
    vcf += "1\t" + std::to_string(1000 * (record + 1)) + "\t.\tA\tG\t.\tPASS\t.\tGT\t" + calls[record] + "\n";
  }
  write_text_file(file("ghost.vcf"), vcf);
  const std::string command = tamis_binary() + " relatedness --genotypes " + file("ghost.vcf") + " --out " +
                              file("ghost") + " --call-rate-floor 0 --quiet 2>&1";
  int code = 0;
  const std::string printed = capture_command(command, &code);
  EXPECT_EQ(code, static_cast<int>(ExitCode::genotype_input));
  EXPECT_NE(printed.find("ghost"), std::string::npos) << printed;
  EXPECT_NE(printed.find("--drop-samples"), std::string::npos) << printed;
  EXPECT_FALSE(file_exists(file("ghost.relatedness.tsv.gz")));
  EXPECT_FALSE(file_exists(file("ghost.relatedness.tsv.gz.partial")));
}

// Kinship phi from the pedigree by the recursive (tabular) method, common
// practice: phi(i, i) = (1 + phi(father, mother)) / 2; for i not an
// ancestor of j, phi(i, j) = (phi(father_i, j) + phi(mother_i, j)) / 2;
// founders are unrelated. The coefficient of relationship is 2 phi
// (Wright 1922, Am Nat 56:330-338).
class PedigreeKinship {
 public:
  explicit PedigreeKinship(const std::string& families_text) {
    for (const std::string& line : lines_of(families_text)) {
      const std::vector<std::string> fields = split_fields(line);
      if (fields.size() < 4 || fields[0] == "family") continue;
      order_[fields[1]] = parents_.size();
      parents_.push_back({fields[1], fields[2], fields[3]});
    }
  }
  double relationship(const std::string& a, const std::string& b) { return 2.0 * kinship(a, b); }

 private:
  struct Parents {
    std::string id, father, mother;
  };
  double kinship(const std::string& a, const std::string& b) {
    if (a == "NA" || b == "NA") return 0.0;
    const std::string key = a < b ? a + "|" + b : b + "|" + a;
    const auto found = memo_.find(key);
    if (found != memo_.end()) return found->second;
    double value = 0.0;
    // Parents are listed before their children, so the later of the two is
    // never the other's ancestor.
    const Parents& later = parents_[std::max(order_.at(a), order_.at(b))];
    const std::string& other = order_.at(a) > order_.at(b) ? b : a;
    if (a == b) {
      value = 0.5 * (1.0 + kinship(later.father, later.mother));
    } else if (later.father != "NA") {
      value = 0.5 * (kinship(later.father, other) + kinship(later.mother, other));
    }
    memo_[key] = value;
    return value;
  }
  std::map<std::string, std::size_t> order_;
  std::vector<Parents> parents_;
  std::map<std::string, double> memo_;
};

// Relatives in the simulated pedigree: each class's mean relatedness meets
// the coefficient of relationship (parent-offspring and full siblings 0.5,
// half-siblings 0.25, first cousins 0.125; Wright 1922) within sampling
// error, 4 standard errors of the class mean. Hard calls (GT), as the
// dosages' DS values are shrunk toward the mean.
TEST_F(RelatednessEndToEnd, RelativesMatchTheirCoefficientsOfRelationship) {
  ASSERT_EQ(relatedness("pedigree", "--dosage-from GT --keep-above 0.02 --threads 2"), 0);
  PedigreeKinship pedigree(read_text_file(file("cohort.families.tsv")));
  std::map<double, std::vector<double>> by_coefficient;
  std::size_t unrelated_rows = 0;
  for (const std::vector<std::string>& row : data_rows(read_gzip_file(file("pedigree.relatedness.tsv.gz")))) {
    if (row[0] == row[1]) continue;
    const double expected = pedigree.relationship(row[0], row[1]);
    if (expected == 0.0) {
      ++unrelated_rows;
    } else {
      by_coefficient[expected].push_back(std::stod(row[2]));
    }
  }
  std::string classes;
  for (const auto& [coefficient, values] : by_coefficient) classes += " " + std::to_string(coefficient);
  EXPECT_EQ(by_coefficient.size(), 3u) << "relationships in the pedigree:" << classes;
  for (double coefficient : {0.5, 0.25, 0.125}) {
    const std::vector<double>& values = by_coefficient[coefficient];
    ASSERT_GE(values.size(), 20u) << "too few pairs of relationship " << coefficient;
    double sum = 0.0, squares = 0.0;
    for (double value : values) sum += value;
    const double mean = sum / static_cast<double>(values.size());
    for (double value : values) squares += (value - mean) * (value - mean);
    const double standard_error = std::sqrt(squares / static_cast<double>(values.size() - 1) /
                                            static_cast<double>(values.size()));
    EXPECT_NEAR(mean, coefficient, 4.0 * standard_error)
        << values.size() << " pairs of coefficient " << coefficient << ", SE " << standard_error;
  }
  EXPECT_GT(unrelated_rows, 0u);
}

}  // namespace
}  // namespace tamis::testing
