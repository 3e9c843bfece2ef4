// Genotype reader: VCF / VCF.gz / BCF input, dosages from GT, DS and GP, and
// the errors a user sees for damaged or inconsistent files.
#include <gtest/gtest.h>

#include <cmath>
#include <functional>
#include <limits>
#include <sstream>
#include <string>
#include <thread>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis {
namespace {

using testing::capture_command;
using testing::make_temp_dir;
using testing::run_command;

constexpr double nan_value = std::numeric_limits<double>::quiet_NaN();

std::string fixture(const std::string& name) {
  return testing::source_dir() + "/test_data/" + name;
}

DosageBlock read_with(const GenotypeReaderOptions& options) {
  GenotypeReader reader(options);
  DosageBlock block;
  RecordBatch batch;
  // Small batches, so that records are reused across calls and batches
  // straddle the end of a file.
  while (reader.read_batch(batch, 2) > 0) batch.decode(block);
  EXPECT_EQ(reader.read_batch(batch, 2), 0u);
  return block;
}

DosageBlock read_all(const std::vector<std::string>& paths,
                     DosageField field = DosageField::automatic, int io_threads = 0) {
  GenotypeReaderOptions options;
  options.paths = paths;
  options.field = field;
  options.io_threads = io_threads;
  return read_with(options);
}

// The same data as VCF.gz (bgzip 1.16) and BCF (bcftools 1.16 view -Ob), each
// with its index (tabix 1.16 -p vcf, bcftools 1.16 index).
struct FormatCopies {
  std::string vcf, vcf_gz, bcf;
};

FormatCopies make_format_copies(const std::string& vcf, const std::string& dir) {
  FormatCopies copies{vcf, dir + "/copy.vcf.gz", dir + "/copy.bcf"};
  EXPECT_EQ(run_command("bgzip -c '" + vcf + "' > '" + copies.vcf_gz + "' && tabix -p vcf '" +
                        copies.vcf_gz + "'"),
            0);
  EXPECT_EQ(run_command("bcftools view -Ob -o '" + copies.bcf + "' '" + vcf +
                        "' 2>/dev/null && bcftools index '" + copies.bcf + "'"),
            0);
  return copies;
}

std::vector<std::vector<std::string>> split_table(const std::string& text) {
  std::vector<std::vector<std::string>> rows;
  std::stringstream lines(text);
  for (std::string line; std::getline(lines, line);) {
    std::vector<std::string> cells;
    std::stringstream cell_stream(line);
    for (std::string cell; std::getline(cell_stream, cell, '\t');) cells.push_back(cell);
    rows.push_back(cells);
  }
  return rows;
}

std::vector<std::string> split_any(const std::string& text, const std::string& separators) {
  std::vector<std::string> parts(1);
  for (char letter : text) {
    if (separators.find(letter) != std::string::npos) {
      parts.emplace_back();
    } else {
      parts.back() += letter;
    }
  }
  return parts;
}

// Copies of `allele` in a GT string as bcftools prints it; NaN when any
// allele of the call is missing.
double count_allele_in_call(const std::string& call, int allele) {
  double copies = 0.0;
  for (const std::string& part : split_any(call, "/|")) {
    if (part == ".") return nan_value;
    if (std::stoi(part) == allele) copies += 1.0;
  }
  return copies;
}

std::vector<double> parse_numbers(const std::string& text) {
  std::vector<double> values;
  for (const std::string& part : split_any(text, ",")) {
    values.push_back(part == "." ? nan_value : std::stod(part));
  }
  return values;
}

void expect_same_dosage(double actual, double expected, const std::string& context) {
  if (std::isnan(expected)) {
    EXPECT_TRUE(std::isnan(actual)) << context << ": got " << actual;
  } else {
    EXPECT_NEAR(actual, expected, 1e-6) << context;
  }
}

void expect_site_dosages(const DosageBlock& block, std::size_t site_idx,
                         const std::vector<double>& expected) {
  ASSERT_LT(site_idx, block.size());
  ASSERT_EQ(block.sample_count, expected.size());
  const VariantSite& site = block.sites[site_idx];
  for (std::size_t sample_idx = 0; sample_idx < expected.size(); ++sample_idx) {
    expect_same_dosage(block.site_dosages(site_idx)[sample_idx], expected[sample_idx],
                       site.chromosome + ":" + std::to_string(site.position) + " " + site.alt +
                           " sample " + std::to_string(sample_idx + 1));
  }
}

// Each record of `table` (one line per record, one cell per sample) against
// the sites decoded from it, in order: `expected_of(cell, allele)` gives the
// expected dosage of ALT allele `allele` from the reference's cell.
void expect_block_matches_table(const DosageBlock& block, const std::string& table,
                                const std::function<double(const std::string&, int)>& expected_of) {
  std::size_t site_idx = 0;
  for (const auto& cells : split_table(table)) {
    ASSERT_LT(site_idx, block.size());
    const int alt_count = block.sites[site_idx].alt_count;
    for (int allele = 1; allele <= alt_count; ++allele, ++site_idx) {
      ASSERT_EQ(block.sites[site_idx].allele_index, allele);
      std::vector<double> expected;
      for (const std::string& cell : cells) expected.push_back(expected_of(cell, allele));
      expect_site_dosages(block, site_idx, expected);
    }
  }
  EXPECT_EQ(site_idx, block.size());
}

void expect_identical_blocks(const DosageBlock& left, const DosageBlock& right) {
  ASSERT_EQ(left.size(), right.size());
  ASSERT_EQ(left.sample_count, right.sample_count);
  for (std::size_t site_idx = 0; site_idx < left.size(); ++site_idx) {
    const VariantSite& a = left.sites[site_idx];
    const VariantSite& b = right.sites[site_idx];
    EXPECT_EQ(a.chromosome, b.chromosome);
    EXPECT_EQ(a.position, b.position);
    EXPECT_EQ(a.id, b.id);
    EXPECT_EQ(a.ref, b.ref);
    EXPECT_EQ(a.alt, b.alt);
    EXPECT_EQ(a.allele_index, b.allele_index);
    EXPECT_EQ(a.record_number, b.record_number);
    EXPECT_EQ(a.source, b.source);
    EXPECT_EQ(a.has_hard_calls, b.has_hard_calls);
  }
  EXPECT_EQ(left.ploidy, right.ploidy);
  EXPECT_EQ(left.diploid_calls, right.diploid_calls);
  ASSERT_EQ(left.dosages.size(), right.dosages.size());
  for (std::size_t value_idx = 0; value_idx < left.dosages.size(); ++value_idx) {
    const double a = left.dosages[value_idx], b = right.dosages[value_idx];
    EXPECT_TRUE((std::isnan(a) && std::isnan(b)) || a == b) << value_idx << ": " << a << " " << b;
  }
}

// Runs `action`, which must throw a genotype_input Error whose text holds
// every one of `fragments`; returns the error for further checks.
Error expect_genotype_error(const std::function<void()>& action,
                            const std::vector<std::string>& fragments) {
  try {
    action();
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), ExitCode::genotype_input) << error.what();
    for (const std::string& fragment : fragments) {
      EXPECT_NE(std::string(error.what()).find(fragment), std::string::npos)
          << "missing '" << fragment << "' in: " << error.what();
    }
    EXPECT_FALSE(error.fix().empty()) << error.what();
    return error;
  }
  ADD_FAILURE() << "expected a tamis::Error";
  return Error(ExitCode::internal, "", "");
}

// ---- dosages against bcftools --------------------------------------------

TEST(GenotypeDosages, GtCountsMatchBcftoolsQueryInEveryFormat) {
  const std::string dir = make_temp_dir("genotypes_gt_formats");
  const FormatCopies copies = make_format_copies(fixture("genotypes_gt.vcf"), dir);
  // The calls as bcftools 1.16 prints them; allele counts follow from the strings.
  const std::string calls = capture_command("bcftools query -f '[%GT\\t]\\n' '" + copies.vcf + "'");
  ASSERT_FALSE(calls.empty());
  for (const std::string& path : {copies.vcf, copies.vcf_gz, copies.bcf}) {
    SCOPED_TRACE(path);
    DosageBlock block = read_all({path});
    EXPECT_EQ(block.size(), 9u);  // 7 records, two of them with two ALT alleles
    expect_block_matches_table(block, calls, count_allele_in_call);
  }
}

TEST(GenotypeDosages, GtHandlesHaploidMixedPloidyAndPartlyMissingCalls) {
  DosageBlock block = read_all({fixture("genotypes_gt.vcf")});
  ASSERT_EQ(block.size(), 9u);
  // Hand-computed from the fixture (copies of the ALT allele in each call).
  expect_site_dosages(block, 0, {0, 1, 2, nan_value});          // 1:100 0/0 0/1 1/1 ./.
  expect_site_dosages(block, 1, {1, 1, 0, 0});                  // 1:200 T
  expect_site_dosages(block, 2, {0, 1, 2, 0});                  // 1:200 G
  expect_site_dosages(block, 3, {nan_value, 2, nan_value, 1});  // 0/. counts as missing
  expect_site_dosages(block, 4, {1, 2, 0, nan_value});          // FORMAT DP:GT:AD
  expect_site_dosages(block, 5, {1, 0, 0, 2});                  // FORMAT AD:GT
  expect_site_dosages(block, 6, {0, 1, 1, nan_value});          // X: 0 1 0/1 .
  expect_site_dosages(block, 7, {0, 1, nan_value, 1});          // X: 2 1 ./1 1/2, allele A
  expect_site_dosages(block, 8, {1, 0, nan_value, 1});          // allele G
}

TEST(GenotypeDosages, DsMatchesBcftoolsQueryInEveryFormat) {
  const std::string dir = make_temp_dir("genotypes_ds_formats");
  const FormatCopies copies = make_format_copies(fixture("genotypes_ds.vcf"), dir);
  // DS as printed by bcftools 1.16 query, one value per ALT allele (Number=A).
  const std::string values = capture_command("bcftools query -f '[%DS\\t]\\n' '" + copies.vcf + "'");
  ASSERT_FALSE(values.empty());
  auto dosage_from_cell = [](const std::string& cell, int allele) {
    std::vector<double> numbers = parse_numbers(cell);
    return numbers.size() == 1 && std::isnan(numbers[0]) ? nan_value : numbers.at(allele - 1);
  };
  for (const std::string& path : {copies.vcf, copies.vcf_gz, copies.bcf}) {
    SCOPED_TRACE(path);
    DosageBlock block = read_all({path});
    EXPECT_EQ(block.size(), 6u);
    for (const VariantSite& site : block.sites) EXPECT_EQ(site.source, DosageField::ds);
    expect_block_matches_table(block, values, dosage_from_cell);
  }
}

double expected_count_from_probabilities(const std::string& cell, int allele) {
  // Expected ALT count = sum over genotypes of copies x probability, genotypes
  // in the hts-specs VCF 4.3 order (section 1.6.2, section number from memory):
  // (j,k), j <= k, at index k(k+1)/2 + j.
  std::vector<double> probabilities = parse_numbers(cell);
  if (probabilities.size() == 1 && std::isnan(probabilities[0])) return nan_value;
  double expected = 0.0;
  // Haploid calls give one probability per allele; the fixture's haploid
  // calls are biallelic, so two values mean haploid.
  if (probabilities.size() == 2) return probabilities.at(allele);
  int allele_count = 1;
  while (allele_count * (allele_count + 1) / 2 < static_cast<int>(probabilities.size())) {
    ++allele_count;
  }
  for (int second = 0; second < allele_count; ++second) {
    for (int first = 0; first <= second; ++first) {
      double copies = (first == allele) + (second == allele);
      expected += copies * probabilities[second * (second + 1) / 2 + first];
    }
  }
  return expected;
}

TEST(GenotypeDosages, GpGivesTheExpectedAltCountInEveryFormat) {
  const std::string dir = make_temp_dir("genotypes_gp_formats");
  const FormatCopies copies = make_format_copies(fixture("genotypes_gp.vcf"), dir);
  // GP as printed by bcftools 1.16 query; the dosage formula is applied here.
  const std::string values = capture_command("bcftools query -f '[%GP\\t]\\n' '" + copies.vcf + "'");
  for (const std::string& path : {copies.vcf, copies.vcf_gz, copies.bcf}) {
    SCOPED_TRACE(path);
    DosageBlock block = read_all({path});
    ASSERT_EQ(block.size(), 4u);
    for (const VariantSite& site : block.sites) EXPECT_EQ(site.source, DosageField::gp);
    // Hand-computed: 1:100 0.8+2x0.2 = 1.8; 1:200 T 0.2+2x0.1+0.05 = 0.45,
    // G 0.1+0.05+2x0.05 = 0.25; X haploid 0.9,0.1 gives 0.1.
    expect_site_dosages(block, 0, {0, 1.0, 1.8, nan_value});
    expect_site_dosages(block, 1, {0.45, 0, 1, nan_value});
    expect_site_dosages(block, 2, {0.25, 2, 0, nan_value});
    expect_site_dosages(block, 3, {0.1, 1, 1.0, nan_value});
    // The X record holds haploid (2 values) and diploid (3 values) samples.
    const std::string x_record = values.substr(values.rfind('\n', values.size() - 2) + 1);
    EXPECT_EQ(x_record, "0.9,0.1\t0,1\t0.25,0.5,0.25\t.\t\n");
  }
}

TEST(GenotypeDosages, GpMatchesFormulaOnBcftoolsValues) {
  const std::string path = fixture("genotypes_gp.vcf");
  // GP as printed by bcftools 1.16 query.
  const std::string values = capture_command("bcftools query -f '[%GP\\t]\\n' '" + path + "'");
  expect_block_matches_table(read_all({path}), values, expected_count_from_probabilities);
}

TEST(GenotypeDosages, SameDataDecodesIdenticallyAsVcfVcfGzAndBcf) {
  for (const std::string name : {"genotypes_gt.vcf", "genotypes_ds.vcf", "genotypes_gp.vcf"}) {
    SCOPED_TRACE(name);
    const std::string dir = make_temp_dir("genotypes_identical_" + name);
    const FormatCopies copies = make_format_copies(fixture(name), dir);
    const DosageBlock from_vcf = read_all({copies.vcf});
    expect_identical_blocks(from_vcf, read_all({copies.vcf_gz}));
    expect_identical_blocks(from_vcf, read_all({copies.bcf}));
    expect_identical_blocks(from_vcf, read_all({copies.vcf_gz}, DosageField::automatic, 2));
    expect_identical_blocks(from_vcf, read_all({copies.bcf}, DosageField::automatic, 2));
  }
}

TEST(GenotypeDosages, SitesDescribeTheirRecord) {
  DosageBlock block = read_all({fixture("genotypes_gt.vcf")});
  ASSERT_EQ(block.size(), 9u);
  const VariantSite& first = block.sites[0];
  EXPECT_EQ(first.chromosome, "1");
  EXPECT_EQ(first.position, 100);
  EXPECT_EQ(first.id, "rs1");
  EXPECT_EQ(first.ref, "A");
  EXPECT_EQ(first.alt, "G");
  EXPECT_EQ(first.allele_index, 1);
  EXPECT_EQ(first.alt_count, 1);
  EXPECT_EQ(first.file_index, 0u);
  EXPECT_EQ(first.record_number, 1u);
  EXPECT_EQ(first.source, DosageField::gt);
  const VariantSite& second_alt = block.sites[2];
  EXPECT_EQ(second_alt.position, 200);
  EXPECT_EQ(second_alt.id, ".");  // hts-specs VCF 4.3: "." when there is no identifier
  EXPECT_EQ(second_alt.alt, "G");
  EXPECT_EQ(second_alt.allele_index, 2);
  EXPECT_EQ(second_alt.alt_count, 2);
  EXPECT_EQ(second_alt.record_number, 2u);
  EXPECT_EQ(block.sites[8].chromosome, "X");
  EXPECT_EQ(block.sites[8].record_number, 7u);
}

TEST(GenotypeDosages, DistinctBatchesDecodeInParallel) {
  const std::string dir = make_temp_dir("genotypes_parallel");
  const FormatCopies copies = make_format_copies(fixture("genotypes_gt.vcf"), dir);
  GenotypeReaderOptions options;
  options.paths = {copies.bcf, copies.vcf_gz};
  GenotypeReader reader(options);
  std::vector<RecordBatch> batches;
  for (RecordBatch batch; reader.read_batch(batch, 3) > 0;) batches.push_back(std::move(batch));
  ASSERT_EQ(batches.size(), 5u);  // 14 records in batches of 3
  std::vector<DosageBlock> parallel(batches.size());
  std::vector<std::thread> workers;
  for (std::size_t batch_idx = 0; batch_idx < batches.size(); ++batch_idx) {
    workers.emplace_back([&, batch_idx] { batches[batch_idx].decode(parallel[batch_idx]); });
  }
  for (std::thread& worker : workers) worker.join();
  DosageBlock serial = read_all(options.paths);
  DosageBlock joined;
  joined.sample_count = serial.sample_count;
  for (const DosageBlock& part : parallel) {
    joined.sites.insert(joined.sites.end(), part.sites.begin(), part.sites.end());
    joined.dosages.insert(joined.dosages.end(), part.dosages.begin(), part.dosages.end());
    joined.ploidy.insert(joined.ploidy.end(), part.ploidy.begin(), part.ploidy.end());
    joined.diploid_calls.insert(joined.diploid_calls.end(), part.diploid_calls.begin(),
                                part.diploid_calls.end());
  }
  expect_identical_blocks(serial, joined);
}

// ---- hard calls -------------------------------------------------------------

// What a GT string as bcftools prints it says about one ALT allele: the
// called alleles (not '.') and, for a fully called diploid GT, the copies.
struct ExpectedCall {
  int ploidy = 0;
  int diploid_call = -1;
};

ExpectedCall expected_call(const std::string& call, int allele) {
  ExpectedCall expected;
  const std::vector<std::string> parts = split_any(call, "/|");
  int copies = 0;
  bool any_missing = false;
  for (const std::string& part : parts) {
    if (part == ".") {
      any_missing = true;
      continue;
    }
    ++expected.ploidy;
    copies += std::stoi(part) == allele;
  }
  if (parts.size() == 2 && !any_missing) expected.diploid_call = copies;
  return expected;
}

// Each record of `calls` (bcftools query '[%GT\t]\n') against the hard calls
// of the sites decoded from it; a record that `record_has_gt` marks false has
// no GT, so its sites carry ploidy 0 and no call.
void expect_calls_match_table(const DosageBlock& block, const std::string& calls,
                              const std::vector<bool>& record_has_gt) {
  ASSERT_EQ(block.ploidy.size(), block.dosages.size());
  ASSERT_EQ(block.diploid_calls.size(), block.dosages.size());
  std::size_t site_idx = 0;
  std::size_t record_idx = 0;
  for (const auto& cells : split_table(calls)) {
    ASSERT_LT(site_idx, block.size());
    ASSERT_LT(record_idx, record_has_gt.size());
    const int alt_count = block.sites[site_idx].alt_count;
    for (int allele = 1; allele <= alt_count; ++allele, ++site_idx) {
      const VariantSite& site = block.sites[site_idx];
      EXPECT_EQ(site.has_hard_calls, record_has_gt[record_idx]) << site.position;
      for (std::size_t sample_idx = 0; sample_idx < cells.size(); ++sample_idx) {
        const ExpectedCall expected = record_has_gt[record_idx] ? expected_call(cells[sample_idx], allele)
                                                                : ExpectedCall{};
        const std::string context = site.chromosome + ":" + std::to_string(site.position) + " allele " +
                                    std::to_string(allele) + " sample " + std::to_string(sample_idx + 1) +
                                    " GT " + cells[sample_idx];
        EXPECT_EQ(block.site_ploidy(site_idx)[sample_idx], expected.ploidy) << context;
        EXPECT_EQ(block.site_diploid_calls(site_idx)[sample_idx], expected.diploid_call) << context;
      }
    }
    ++record_idx;
  }
  EXPECT_EQ(site_idx, block.size());
}

TEST(GenotypeHardCalls, GtCallsMatchBcftoolsQueryInEveryFormat) {
  const std::string dir = make_temp_dir("genotypes_hard_calls_gt");
  const FormatCopies copies = make_format_copies(fixture("genotypes_gt.vcf"), dir);
  // The calls as bcftools 1.16 prints them; ploidy and copies follow from the strings.
  const std::string calls = capture_command("bcftools query -f '[%GT\\t]\\n' '" + copies.vcf + "'");
  for (const std::string& path : {copies.vcf, copies.vcf_gz, copies.bcf}) {
    SCOPED_TRACE(path);
    expect_calls_match_table(read_all({path}), calls, std::vector<bool>(7, true));
  }
}

TEST(GenotypeHardCalls, HandWorkedCallsOfMixedPloidyRecords) {
  const DosageBlock block = read_all({fixture("genotypes_gt.vcf")});
  ASSERT_EQ(block.size(), 9u);
  // Hand-worked from the fixture. 1:300: 0/. 1|1 . 0/1
  EXPECT_EQ(std::vector<int>(block.site_ploidy(3), block.site_ploidy(3) + 4),
            (std::vector<int>{1, 2, 0, 2}));
  EXPECT_EQ(std::vector<int>(block.site_diploid_calls(3), block.site_diploid_calls(3) + 4),
            (std::vector<int>{-1, 2, -1, 1}));
  // X:2000 T A,G with calls 2 1 ./1 1/2; allele G (index 2) is site 8.
  EXPECT_EQ(std::vector<int>(block.site_ploidy(8), block.site_ploidy(8) + 4),
            (std::vector<int>{1, 1, 1, 2}));
  EXPECT_EQ(std::vector<int>(block.site_diploid_calls(7), block.site_diploid_calls(7) + 4),
            (std::vector<int>{-1, -1, -1, 1}));
  EXPECT_EQ(std::vector<int>(block.site_diploid_calls(8), block.site_diploid_calls(8) + 4),
            (std::vector<int>{-1, -1, -1, 1}));
}

TEST(GenotypeHardCalls, FilledAlongsideDsAndGpDosages) {
  // Which records carry GT, read off the fixtures' FORMAT columns: in the DS
  // fixture 2:50 has GQ:DS only; in the GP fixture 1:200 has GP only.
  const std::vector<std::pair<std::string, std::vector<bool>>> fixtures = {
      {"genotypes_ds.vcf", {true, true, true, false, true}},
      {"genotypes_gp.vcf", {true, false, true}}};
  for (const auto& [name, has_gt] : fixtures) {
    SCOPED_TRACE(name);
    const std::string dir = make_temp_dir("genotypes_hard_calls_" + name);
    const FormatCopies copies = make_format_copies(fixture(name), dir);
    // The calls as bcftools 1.16 prints them.
    const std::string calls = capture_command("bcftools query -f '[%GT\\t]\\n' '" + copies.vcf + "'");
    for (const std::string& path : {copies.vcf, copies.vcf_gz, copies.bcf}) {
      SCOPED_TRACE(path);
      expect_calls_match_table(read_all({path}), calls, has_gt);
    }
  }
}

TEST(GenotypeHardCalls, HaploidDosageScalesOnlyGtDosages) {
  GenotypeReaderOptions options;
  options.paths = {fixture("genotypes_gt.vcf")};
  options.haploid_dosage = 2;
  DosageBlock block = read_with(options);
  ASSERT_EQ(block.size(), 9u);
  // Hand-worked: X:1000 calls 0 1 0/1 . give 0 2 1 NaN; X:2000 2 1 ./1 1/2.
  expect_site_dosages(block, 6, {0, 2, 1, nan_value});
  expect_site_dosages(block, 7, {0, 2, nan_value, 1});
  expect_site_dosages(block, 8, {2, 0, nan_value, 1});
  expect_site_dosages(block, 0, {0, 1, 2, nan_value});  // diploid calls are unchanged
  // The hard calls do not depend on the scale.
  const DosageBlock unscaled = read_all(options.paths);
  EXPECT_EQ(block.ploidy, unscaled.ploidy);
  EXPECT_EQ(block.diploid_calls, unscaled.diploid_calls);

  // DS stays as written even where GT is haploid (X:1000 GT:DS 0:0 1:1 0/1:0.8).
  options.paths = {fixture("genotypes_ds.vcf")};
  const DosageBlock ds_block = read_with(options);
  expect_site_dosages(ds_block, ds_block.size() - 1, {0, 1, 0.8, nan_value});
}

TEST(GenotypeHardCalls, HaploidDosageOtherThanOneOrTwoIsAUsageError) {
  GenotypeReaderOptions options;
  options.paths = {fixture("genotypes_gt.vcf")};
  options.haploid_dosage = 3;
  try {
    GenotypeReader reader(options);
    ADD_FAILURE() << "expected a tamis::Error";
  } catch (const Error& error) {
    EXPECT_EQ(error.code(), ExitCode::usage);
    EXPECT_NE(std::string(error.what()).find("3"), std::string::npos) << error.what();
  }
}

// ---- files, samples and fields -------------------------------------------

TEST(GenotypeFiles, FilesAreReadInOrderWithTheirOwnRecordNumbers) {
  GenotypeReaderOptions options;
  options.paths = {fixture("genotypes_gt.vcf"), fixture("genotypes_gt_chr3.vcf")};
  GenotypeReader reader(options);
  EXPECT_EQ(reader.sample_ids(), (std::vector<std::string>{"S1", "S2", "S3", "S4"}));
  EXPECT_EQ(reader.paths(), options.paths);
  DosageBlock block = read_all(options.paths);
  ASSERT_EQ(block.size(), 11u);
  EXPECT_EQ(block.sites[9].chromosome, "3");
  EXPECT_EQ(block.sites[9].file_index, 1u);
  EXPECT_EQ(block.sites[9].record_number, 1u);
  EXPECT_EQ(block.sites[10].record_number, 2u);
  expect_site_dosages(block, 10, {2, 1, 0, nan_value});
}

TEST(GenotypeFiles, AutomaticFieldPrefersDsThenGpThenGt) {
  GenotypeReaderOptions options;
  options.paths = {fixture("genotypes_ds.vcf"), fixture("genotypes_gp.vcf"), fixture("genotypes_gt.vcf")};
  GenotypeReader reader(options);
  EXPECT_EQ(reader.resolved_field(0), DosageField::ds);
  EXPECT_EQ(reader.resolved_field(1), DosageField::gp);
  EXPECT_EQ(reader.resolved_field(2), DosageField::gt);
  EXPECT_STREQ(dosage_field_name(DosageField::automatic), "auto");
  EXPECT_STREQ(dosage_field_name(DosageField::gp), "GP");
}

TEST(GenotypeFiles, RequestedGtIsUsedEvenWhenDsExists) {
  const std::string path = fixture("genotypes_ds.vcf");
  GenotypeReaderOptions options;
  options.paths = {path};
  options.field = DosageField::gt;
  GenotypeReader reader(options);
  EXPECT_EQ(reader.resolved_field(0), DosageField::gt);
  RecordBatch batch;
  ASSERT_EQ(reader.read_batch(batch, 3), 3u);
  DosageBlock block;
  batch.decode(block);
  ASSERT_EQ(block.size(), 4u);
  EXPECT_EQ(block.sites[0].source, DosageField::gt);
  expect_site_dosages(block, 0, {0, 1, 2, nan_value});  // GT 0/0 0/1 1/1 ./.
  // The fourth record (2:50) carries DS but no GT.
  ASSERT_EQ(reader.read_batch(batch, 3), 2u);
  expect_genotype_error([&] { batch.decode(block); }, {path, "record 4", "2:50", "FORMAT/GT"});
}

TEST(GenotypeFiles, RequestedFieldMissingFromHeaderListsTheDeclaredFields) {
  const std::string path = fixture("genotypes_gt.vcf");
  expect_genotype_error([&] { read_all({path}, DosageField::ds); },
                        {path, "FORMAT/DS", "GT, DP, AD"});
}

TEST(GenotypeFiles, DifferentSampleOrderNamesTheSecondFile) {
  const std::string first = fixture("genotypes_gt.vcf");
  const std::string second = fixture("genotypes_other_sample_order.vcf");
  Error error = expect_genotype_error([&] { read_all({first, second}); },
                                      {second, "sample 2", "'S3'", "'S2'"});
  EXPECT_EQ(error.where().find(first), std::string::npos) << error.where();
}

TEST(GenotypeFiles, DuplicateSampleIdsNameBothPositions) {
  const std::string path = fixture("genotypes_duplicate_samples.vcf");
  expect_genotype_error([&] { read_all({path}); }, {path, "'S1'", "sample 1", "sample 4"});
}

TEST(GenotypeFiles, MissingFileIsAGenotypeInputError) {
  const std::string path = fixture("no_such_file.vcf.gz");
  expect_genotype_error([&] { read_all({path}); }, {path});
}

TEST(GenotypeFiles, HeaderOnlyFileHasNoRecords) {
  GenotypeReaderOptions options;
  options.paths = {fixture("genotypes_header_only.vcf")};
  GenotypeReader reader(options);
  EXPECT_EQ(reader.sample_ids().size(), 4u);
  RecordBatch batch;
  EXPECT_EQ(reader.read_batch(batch, 10), 0u);
  EXPECT_EQ(batch.size(), 0u);
  DosageBlock block;
  batch.decode(block);
  EXPECT_EQ(block.size(), 0u);
}

TEST(GenotypeFiles, IndexedRecordCountMatchesBcftoolsIndex) {
  const std::string dir = make_temp_dir("genotypes_index_count");
  const FormatCopies gt = make_format_copies(fixture("genotypes_gt.vcf"), dir);
  const std::string chr3_dir = make_temp_dir("genotypes_index_count_chr3");
  const FormatCopies chr3 = make_format_copies(fixture("genotypes_gt_chr3.vcf"), chr3_dir);
  // Record counts from the indexes, as bcftools 1.16 `index -n` reports them.
  const std::uint64_t expected =
      std::stoull(capture_command("bcftools index -n '" + gt.vcf_gz + "' 2>/dev/null")) +
      std::stoull(capture_command("bcftools index -n '" + chr3.bcf + "' 2>/dev/null"));
  EXPECT_EQ(expected, 9u);

  GenotypeReaderOptions indexed;
  indexed.paths = {gt.vcf_gz, chr3.bcf};
  EXPECT_EQ(GenotypeReader(indexed).indexed_record_count(), expected);
  GenotypeReaderOptions partly_indexed;
  partly_indexed.paths = {gt.vcf_gz, fixture("genotypes_gt_chr3.vcf")};
  EXPECT_EQ(GenotypeReader(partly_indexed).indexed_record_count(), std::nullopt);
}

// ---- damaged files and malformed values ------------------------------------

TEST(GenotypeErrors, TruncatedVcfGzNamesTheFile) {
  const std::string dir = make_temp_dir("genotypes_truncated");
  const FormatCopies copies = make_format_copies(fixture("genotypes_gt.vcf"), dir);
  const std::string cut = dir + "/cut.vcf.gz";
  ASSERT_EQ(run_command("head -c 200 '" + copies.vcf_gz + "' > '" + cut + "'"), 0);
  expect_genotype_error([&] { read_all({cut}); }, {cut});
}

// A VCF large enough for several BGZF blocks (simulated, for this test only).
std::string write_many_record_vcf(const std::string& dir) {
  std::string text =
      "##fileformat=VCFv4.3\n##contig=<ID=1>\n"
      "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n"
      "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT\tS1\tS2\tS3\tS4\n";
  unsigned state = 11;
  const char* calls[] = {"0/0", "0/1", "1/1", "./."};
  for (int record_idx = 0; record_idx < 20000; ++record_idx) {
    text += "1\t" + std::to_string(1000 + record_idx * 7) + "\t.\tA\tG\t.\tPASS\t.\tGT";
    for (int sample_idx = 0; sample_idx < 4; ++sample_idx) {
      state = state * 1103515245u + 12345u;
      text += std::string("\t") + calls[(state >> 16) & 3];
    }
    text += "\n";
  }
  const std::string path = dir + "/many.vcf";
  testing::write_text_file(path, text);
  return path;
}

TEST(GenotypeErrors, DamagedBlockNamesTheRecordAndTheLastPlaceReached) {
  const std::string dir = make_temp_dir("genotypes_damaged");
  const std::string vcf = write_many_record_vcf(dir);
  const std::string damaged = dir + "/damaged.vcf.gz";
  ASSERT_EQ(run_command("bgzip -c '" + vcf + "' > '" + damaged + "'"), 0);
  const long size = std::stol(capture_command("stat -c %s '" + damaged + "'"));
  // Overwrite bytes in the middle, keeping the end-of-file block intact.
  ASSERT_EQ(run_command("head -c 400 /dev/zero | tr '\\0' '\\377' | dd of='" + damaged +
                        "' bs=1 seek=" + std::to_string(size / 2) +
                        " conv=notrunc status=none"),
            0);
  Error error = expect_genotype_error([&] { read_all({damaged}); }, {damaged, "record ", "after 1:"});
  EXPECT_NE(error.fix().find("bgzip -t"), std::string::npos);
}

TEST(GenotypeErrors, UnparsableDsNamesChromPos) {
  const std::string path = fixture("genotypes_bad_ds_text.vcf");
  // bcftools 1.16 view also refuses this record ("Invalid character 'a' in 'DS'").
  expect_genotype_error([&] { read_all({path}); }, {path, "record 2", "1:200"});
}

TEST(GenotypeErrors, WrongDsCountNamesChromPosAndTheExpectedCount) {
  const std::string path = fixture("genotypes_bad_ds_count.vcf");
  expect_genotype_error([&] { read_all({path}); },
                        {path, "record 2", "1:200", "'S2'", "3 value(s), expected 2"});
}

TEST(GenotypeErrors, DsAboveTwoIsRejected) {
  const std::string path = fixture("genotypes_ds_out_of_range.vcf");
  expect_genotype_error([&] { read_all({path}); }, {path, "record 2", "1:300", "'S2'", "2.5"});
}

TEST(GenotypeErrors, RecordWithoutTheDosageFieldNamesChromPos) {
  const std::string path = fixture("genotypes_record_without_ds.vcf");
  expect_genotype_error([&] { read_all({path}); }, {path, "record 2", "2:50", "FORMAT/DS"});
}

TEST(GenotypeErrors, GtAlleleBeyondTheAltAllelesIsRejected) {
  const std::string path = fixture("genotypes_bad_gt_allele.vcf");
  expect_genotype_error([&] { read_all({path}); }, {path, "record 1", "1:100", "'S2'", "allele 5"});
}

TEST(GenotypeErrors, PhredScaledGpIsRejected) {
  const std::string path = fixture("genotypes_gp_phred.vcf");
  expect_genotype_error([&] { read_all({path}); }, {path, "1:100", "'S2'", "phred"});
}

}  // namespace
}  // namespace tamis
