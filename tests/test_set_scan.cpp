// `tamis scan --sets` end to end through the executable (and, where a test
// needs a block size the command line does not offer, through run_scan):
// identical bytes at 1 and 4 threads and at any block size, sets spanning
// blocks and overlapping one another, agreement of every set row with the
// single-variant rows of the same scan, empty and unknown sets counted in
// the log, both list forms, collapsing, the size limit, errors that leave no
// results behind, and the tabix index. The statistics themselves are checked
// against R and mpmath in tests/reference/check_sets_against_r.sh.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <map>
#include <set>
#include <stdexcept>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/scan.hpp"

namespace tamis::testing {
namespace {

const std::string kCovariates = "age,sex,village,pc1,pc2,pc3,pc4";
const std::vector<std::string> kTraits = {"fev1_litres", "winter_wheeze"};
constexpr double kMafCeiling = 0.01;  // the default --set-maf-ceiling

// One VCF record's fixed columns.
struct Record {
  std::string chromosome;
  long long position = 0;
  std::string id, ref, alt;
};

std::vector<Record> records_of(const std::string& vcf_path) {
  std::vector<Record> records;
  for (const std::string& line : lines_of(read_gzip_file(vcf_path))) {
    if (line.empty() || line[0] == '#') continue;
    std::size_t start = 0;
    std::vector<std::string> fields;
    for (int field_idx = 0; field_idx < 5; ++field_idx) {
      const std::size_t end = line.find('\t', start);
      fields.push_back(line.substr(start, end - start));
      start = end + 1;
    }
    records.push_back({fields[0], std::stoll(fields[1]), fields[2], fields[3], fields[4]});
  }
  return records;
}

// A results file's data rows as column name -> text.
using Row = std::map<std::string, std::string>;
std::vector<Row> rows_of(const std::string& gzip_path) {
  const std::vector<std::string> lines = lines_of(read_gzip_file(gzip_path));
  if (lines.empty()) throw std::runtime_error("empty " + gzip_path);
  const std::vector<std::string> header = split_fields(lines[0]);
  std::vector<Row> rows;
  for (std::size_t line_idx = 1; line_idx < lines.size(); ++line_idx) {
    if (lines[line_idx].empty()) continue;
    const std::vector<std::string> fields = split_fields(lines[line_idx]);
    if (fields.size() != header.size()) throw std::runtime_error("ragged row in " + gzip_path);
    Row row;
    for (std::size_t column_idx = 0; column_idx < header.size(); ++column_idx) row[header[column_idx]] = fields[column_idx];
    rows.push_back(std::move(row));
  }
  return rows;
}

std::map<std::string, Row> by_set(const std::vector<Row>& rows) {
  std::map<std::string, Row> named;
  for (const Row& row : rows) named[row.at("set")] = row;
  return named;
}

// A BED set: chromosome, 0-based start, half-open end.
struct BedSet {
  std::string name, chromosome;
  long long start = 0, end = 0;
};

std::string bed_text(const std::vector<BedSet>& sets) {
  std::string text = "track name=saltmarsh_genes\n";
  for (const BedSet& set : sets) {
    text += set.chromosome + "\t" + std::to_string(set.start) + "\t" + std::to_string(set.end) + "\t" + set.name + "\n";
  }
  return text;
}

// The variants of a scan's single-variant rows that a set of this interval
// takes: on its chromosome, inside it, minor allele frequency at most the ceiling.
std::vector<const Row*> eligible_rows(const std::vector<Row>& variants, const BedSet& set) {
  std::vector<const Row*> taken;
  for (const Row& row : variants) {
    if (row.at("chromosome") != set.chromosome) continue;
    const long long position = std::stoll(row.at("base_pair_location"));
    if (position <= set.start || position > set.end) continue;
    const double frequency = std::stod(row.at("effect_allele_frequency"));
    if (std::min(frequency, 1.0 - frequency) <= kMafCeiling) taken.push_back(&row);
  }
  return taken;
}

std::size_t count_in(const std::string& text, const std::string& needle) {
  std::size_t count = 0;
  for (std::size_t at = text.find(needle); at != std::string::npos; at = text.find(needle, at + 1)) ++count;
  return count;
}

class SetScan : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("set_scan");
    // 1,000 samples: blocks of 128 records, so the long set below spans several.
    ASSERT_EQ(run_command(tamis_binary() + " simulate --out " + dir_ + "/cohort --samples 1000 --variants 1200" +
                          " --rare-fraction 0.8 --seed 16 2>/dev/null"),
              0);
    records_ = records_of(dir_ + "/cohort.vcf.gz");
    ASSERT_GT(records_.size(), 1000u);
    std::map<std::string, std::vector<const Record*>> by_chromosome;
    for (const Record& record : records_) by_chromosome[record.chromosome].push_back(&record);
    ASSERT_EQ(by_chromosome.size(), 3u);
    // Windows of 15 records ("genes"), then sets that overlap them and each other.
    for (const auto& [chromosome, on_chromosome] : by_chromosome) {
      for (std::size_t first = 0; first < on_chromosome.size(); first += 15) {
        const std::size_t last = std::min(first + 14, on_chromosome.size() - 1);
        genes_.push_back({"gene_" + chromosome + "_" + std::to_string(first / 15), chromosome,
                          on_chromosome[first]->position - 1, on_chromosome[last]->position});
      }
    }
    const std::vector<const Record*>& chr1 = by_chromosome.at("1");
    const std::vector<const Record*>& chr2 = by_chromosome.at("2");
    ASSERT_GT(chr1.size(), 380u);
    genes_.push_back({"long_span", "1", chr1[20]->position - 1, chr1[380]->position});  // about 3 blocks
    genes_.push_back({"overlap_a", "2", chr2[30]->position - 1, chr2[50]->position});
    genes_.push_back({"overlap_b", "2", chr2[40]->position - 1, chr2[60]->position});
    // No variant at all: past chromosome 1's last record.
    genes_.push_back({"past_the_end", "1", chr1.back()->position + 1000, chr1.back()->position + 2000});
    write_text_file(dir_ + "/genes.bed", bed_text(genes_));
    ASSERT_EQ(run_command(scan_command(dir_ + "/reference", 2, "--sets " + dir_ + "/genes.bed")), 0);
    for (const std::string& trait : kTraits) {
      variants_[trait] = rows_of(dir_ + "/reference." + trait + ".tsv.gz");
      sets_[trait] = rows_of(dir_ + "/reference." + trait + ".sets.tsv.gz");
    }
  }

  static std::string scan_command(const std::string& prefix, int threads, const std::string& extra) {
    return tamis_binary() + " scan --genotypes " + dir_ + "/cohort.vcf.gz --traits " + dir_ +
           "/cohort.traits.tsv --trait fev1_litres --trait winter_wheeze --covariates " + kCovariates +
           " --confirm-below 0 --out " + prefix + " --threads " + std::to_string(threads) + " --quiet " + extra;
  }

  static std::string dir_;
  static std::vector<Record> records_;
  static std::vector<BedSet> genes_;
  static std::map<std::string, std::vector<Row>> variants_;  // single-variant rows of the reference scan
  static std::map<std::string, std::vector<Row>> sets_;      // its set rows
};
std::string SetScan::dir_;
std::vector<Record> SetScan::records_;
std::vector<BedSet> SetScan::genes_;
std::map<std::string, std::vector<Row>> SetScan::variants_;
std::map<std::string, std::vector<Row>> SetScan::sets_;

TEST_F(SetScan, OutputsAreByteIdenticalAtOneAndFourThreads) {
  const std::string sets = "--sets " + dir_ + "/genes.bed";
  ASSERT_EQ(run_command(scan_command(dir_ + "/one", 1, sets)), 0);
  ASSERT_EQ(run_command(scan_command(dir_ + "/four", 4, sets)), 0);
  for (const std::string& trait : kTraits) {
    for (const std::string suffix : {".sets.tsv.gz", ".sets.tsv.gz.tbi", ".tsv.gz", ".tsv.gz.tbi"}) {
      const std::string one = read_text_file(dir_ + "/one." + trait + suffix);
      EXPECT_FALSE(one.empty()) << trait << suffix;
      EXPECT_TRUE(one == read_text_file(dir_ + "/four." + trait + suffix))
          << trait << suffix << " differs between 1 and 4 threads";
    }
  }
}

// Blocks of 8 records and of 256: a set's variants reach its test through
// different blocks, its row must not change.
TEST_F(SetScan, RowsDoNotDependOnTheBlockSize) {
  std::map<std::size_t, std::string> texts;
  for (const std::size_t records_per_block : {std::size_t{8}, std::size_t{256}}) {
    ScanOptions options;
    options.genotype_paths = {dir_ + "/cohort.vcf.gz"};
    options.traits_path = dir_ + "/cohort.traits.tsv";
    options.traits = kTraits;
    options.covariates = split_fields(kCovariates, ',');
    options.confirm_below = 0.0;
    options.threads = 2;
    options.quiet = true;
    options.records_per_block = records_per_block;
    options.sets.path = dir_ + "/genes.bed";
    options.out_prefix = dir_ + "/block_" + std::to_string(records_per_block);
    run_scan(options);
    for (const std::string& trait : kTraits) {
      texts[records_per_block] += read_gzip_file(set_result_path(options.out_prefix, trait));
    }
  }
  EXPECT_FALSE(texts[8].empty());
  EXPECT_TRUE(texts[8] == texts[256]) << "set rows differ between blocks of 8 and 256 records";
}

// Each set row against the scan's own single-variant rows: the variants it
// took (overlapping sets and the set across blocks included), their minor
// allele counts and the smallest single-variant p-value.
TEST_F(SetScan, SetRowsAgreeWithTheSingleVariantRows) {
  for (const std::string& trait : kTraits) {
    const std::map<std::string, Row> written = by_set(sets_.at(trait));
    std::size_t expected_rows = 0;
    for (const BedSet& set : genes_) {
      const std::vector<const Row*> taken = eligible_rows(variants_.at(trait), set);
      const auto row = written.find(set.name);
      if (taken.empty()) {
        EXPECT_EQ(row, written.end()) << set.name << " has no variant below the ceiling but a row";
        continue;
      }
      ++expected_rows;
      ASSERT_NE(row, written.end()) << trait << ": no row for " << set.name;
      const Row& fields = row->second;
      EXPECT_EQ(fields.at("chromosome"), set.chromosome);
      EXPECT_EQ(std::stoll(fields.at("start")), set.start + 1) << "BED start is 0-based, the row's 1-based";
      EXPECT_EQ(std::stoll(fields.at("end")), set.end);
      EXPECT_EQ(std::stoul(fields.at("n_variants")), taken.size()) << trait << " " << set.name;
      double mac = 0.0;
      const Row* top = taken.front();
      for (const Row* variant : taken) {
        mac += std::stod(variant->at("mac"));
        if (std::stod(variant->at("p_value")) < std::stod(top->at("p_value"))) top = variant;
      }
      EXPECT_NEAR(std::stod(fields.at("total_mac")), mac, 1e-6 * mac) << set.name;
      EXPECT_EQ(fields.at("top_variant_p"), top->at("p_value")) << set.name;
      EXPECT_EQ(fields.at("n"), variants_.at(trait).front().at("n"));
      EXPECT_EQ(fields.at("n_collapsed"), "0");
      EXPECT_EQ(fields.at("weights"), "beta_1_25");
      for (const std::string column : {"burden_p", "variance_p", "optimal_p", "cauchy_p", "overall_p"}) {
        const double p = std::stod(fields.at(column));
        EXPECT_TRUE(p > 0.0 && p <= 1.0) << set.name << " " << column << " " << p;
      }
    }
    EXPECT_EQ(sets_.at(trait).size(), expected_rows) << trait;
    EXPECT_TRUE(written.count("long_span") && written.count("overlap_a") && written.count("overlap_b"));
    EXPECT_EQ(written.at("long_span").at("n_cases") == "#NA", trait == "fev1_litres") << "n_cases for binary traits";
  }
}

TEST_F(SetScan, RowsAreSortedByStartWithinEachChromosome) {
  for (const std::string& trait : kTraits) {
    const std::vector<Row>& rows = sets_.at(trait);
    ASSERT_GT(rows.size(), 50u);
    for (std::size_t row_idx = 1; row_idx < rows.size(); ++row_idx) {
      const int chromosome = std::stoi(rows[row_idx].at("chromosome"));
      const int before = std::stoi(rows[row_idx - 1].at("chromosome"));
      ASSERT_GE(chromosome, before);
      if (chromosome == before) {
        EXPECT_GE(std::stoll(rows[row_idx].at("start")), std::stoll(rows[row_idx - 1].at("start")))
            << rows[row_idx].at("set") << " after " << rows[row_idx - 1].at("set");
      }
    }
  }
}

// Sets without a variant (past a chromosome's end, on a chromosome the
// genotype files lack, or of common variants only) are counted in the log
// and not written.
TEST_F(SetScan, SetsWithoutVariantsAreCountedInTheLogNotWritten) {
  std::vector<BedSet> sets = {genes_.front(), {"not_genotyped", "chr9", 1000, 500000}, genes_.back()};
  write_text_file(dir_ + "/empty.bed", bed_text(sets));
  ASSERT_EQ(run_command(scan_command(dir_ + "/empty", 2, "--sets " + dir_ + "/empty.bed")), 0);
  const std::string log = read_text_file(dir_ + "/empty.log");
  for (const std::string& trait : kTraits) {
    const std::map<std::string, Row> written = by_set(rows_of(dir_ + "/empty." + trait + ".sets.tsv.gz"));
    EXPECT_EQ(written.size(), 1u);
    EXPECT_EQ(written.count(genes_.front().name), 1u);
    EXPECT_NE(log.find("trait " + trait + ": 1 sets tested, 2 with no variant left after filtering"), std::string::npos)
        << log;
  }
}

// A list names variants by VCF ID or by chr:pos:ref:alt; the same variants
// either way give the same tests.
TEST_F(SetScan, ListSetsByIdAndByAllelesGiveTheSameRow) {
  std::string list = "# saltmarsh test sets\n";
  std::size_t listed = 0;
  for (const Record& record : records_) {
    if (record.chromosome != "2" || record.id == "." || record.alt.find(',') != std::string::npos) continue;
    list += "by_id\t" + record.id + "\n";
    list += "by_alleles\t" + record.chromosome + ":" + std::to_string(record.position) + ":" + record.ref + ":" +
            record.alt + "\n";
    if (++listed == 40) break;
  }
  ASSERT_EQ(listed, 40u);
  write_text_file(dir_ + "/two_forms.txt", list);
  ASSERT_EQ(run_command(scan_command(dir_ + "/two_forms", 2, "--sets " + dir_ + "/two_forms.txt")), 0);
  for (const std::string& trait : kTraits) {
    std::map<std::string, Row> written = by_set(rows_of(dir_ + "/two_forms." + trait + ".sets.tsv.gz"));
    ASSERT_EQ(written.size(), 2u) << trait;
    Row& by_id = written.at("by_id");
    Row& by_alleles = written.at("by_alleles");
    EXPECT_GT(std::stoi(by_id.at("n_variants")), 5);
    // The ID set's extent is its variants'; the allele list's, its entries'.
    for (Row* row : {&by_id, &by_alleles}) {
      for (const std::string column : {"set", "start", "end"}) row->erase(column);
    }
    EXPECT_EQ(by_id, by_alleles) << trait;
  }
}

TEST_F(SetScan, ListedWeightsWithABedFileAreRefused) {
  int code = 0;
  const std::string out = dir_ + "/listed_bed";
  const std::string message =
      capture_command(scan_command(out, 2, "--sets " + dir_ + "/genes.bed --set-weights listed") + " 2>&1", &code);
  EXPECT_EQ(code, 2) << "usage errors exit with code 2 (README exit-code table)";
  EXPECT_NE(message.find("--set-weights listed"), std::string::npos) << message;
  EXPECT_NE(message.find("genes.bed"), std::string::npos) << message;
  for (const std::string& trait : kTraits) {
    EXPECT_FALSE(file_exists(out + "." + trait + ".sets.tsv.gz"));
    EXPECT_FALSE(file_exists(out + "." + trait + ".tsv.gz"));
  }
}

// A malformed line is named by file and line, and no results file is left
// under its final name.
TEST_F(SetScan, MalformedSetFilesNameTheFileAndLineAndLeaveNoResults) {
  const std::map<std::string, std::string> files = {
      {"bad_end.bed", "track name=x\n1\t1000\t2000\tgene_a\n1\t5000\t4000\tgene_b\n"},
      {"bad_alleles.txt", "set_a\t1:1000:A:G\nset_a\t1:12x34:A:G\n"},
  };
  for (const auto& [name, text] : files) {
    const std::string path = dir_ + "/" + name;
    write_text_file(path, text);
    const std::string out = dir_ + "/malformed_" + name;
    int code = 0;
    const std::string message = capture_command(scan_command(out, 2, "--sets " + path) + " 2>&1", &code);
    EXPECT_EQ(code, 2) << name << ": " << message;
    EXPECT_NE(message.find(path), std::string::npos) << message;
    const std::string line = name == "bad_end.bed" ? "line 3" : "line 2";
    EXPECT_NE(message.find(line), std::string::npos) << message;
    for (const std::string& trait : kTraits) {
      EXPECT_FALSE(file_exists(out + "." + trait + ".sets.tsv.gz")) << name;
      EXPECT_FALSE(file_exists(out + "." + trait + ".tsv.gz")) << name;
    }
  }
}

// --set-collapse-mac 2.5 (hard calls, so counts are whole): a set's variants
// with a minor allele count of at most 2 become one, when there are two or more.
TEST_F(SetScan, UltraRareVariantsAreCollapsed) {
  const std::string out = dir_ + "/collapsed";
  ASSERT_EQ(run_command(scan_command(out, 2,
                                     "--sets " + dir_ + "/genes.bed --dosage-from GT --set-collapse-mac 2.5")),
            0);
  std::size_t sets_with_collapsing = 0, collapsed_total = 0;
  for (const std::string& trait : kTraits) {
    const std::vector<Row> variants = rows_of(out + "." + trait + ".tsv.gz");
    const std::map<std::string, Row> written = by_set(rows_of(out + "." + trait + ".sets.tsv.gz"));
    for (const BedSet& set : genes_) {
      const std::vector<const Row*> taken = eligible_rows(variants, set);
      if (taken.empty()) continue;
      std::size_t ultra_rare = 0;
      for (const Row* variant : taken) ultra_rare += std::stod(variant->at("mac")) <= 2.5;
      const Row& row = written.at(set.name);
      EXPECT_EQ(std::stoul(row.at("n_variants")), taken.size());
      EXPECT_EQ(std::stoul(row.at("n_collapsed")), ultra_rare >= 2 ? ultra_rare : 0) << set.name;
      if (ultra_rare >= 2) {
        ++sets_with_collapsing;
        collapsed_total += ultra_rare;
      }
    }
  }
  EXPECT_GT(sets_with_collapsing, 20u);
  const std::string log = read_text_file(out + ".log");
  EXPECT_NE(log.find("minor allele counts up to 2.5 summed into one variant per set"), std::string::npos) << log;
  EXPECT_EQ(count_in(log, "ultra-rare variants collapsed"), kTraits.size()) << log;
}

TEST_F(SetScan, SetsAboveTheSizeLimitAreSkippedWithAWarning) {
  const std::string out = dir_ + "/limited";
  ASSERT_EQ(run_command(scan_command(out, 2, "--sets " + dir_ + "/genes.bed --set-max-variants 100")), 0);
  for (const std::string& trait : kTraits) {
    const std::map<std::string, Row> written = by_set(rows_of(out + "." + trait + ".sets.tsv.gz"));
    EXPECT_EQ(written.count("long_span"), 0u);
    EXPECT_EQ(written.size() + 1, sets_.at(trait).size());
  }
  const std::string log = read_text_file(out + ".log");
  EXPECT_EQ(count_in(log, "sets with more than 100 variants skipped (long_span)"), kTraits.size()) << log;
}

// tabix 1.16 answers region queries on the sets file: every row whose
// [start, end] overlaps the region (common practice for indexed tables).
TEST_F(SetScan, TabixAnswersRegionQueries) {
  if (run_command("tabix --version > /dev/null 2>&1") != 0) GTEST_SKIP() << "tabix is not installed";
  const std::string path = dir_ + "/reference.fev1_litres.sets.tsv.gz";
  ASSERT_TRUE(file_exists(path + ".tbi"));
  const std::vector<std::string> all = lines_of(read_gzip_file(path));
  const long long from = 200000, to = 400000;
  std::vector<std::string> expected;
  for (std::size_t line_idx = 1; line_idx < all.size(); ++line_idx) {
    const std::vector<std::string> fields = split_fields(all[line_idx]);
    if (fields[1] == "2" && std::stoll(fields[2]) <= to && std::stoll(fields[3]) >= from) {
      expected.push_back(all[line_idx]);
    }
  }
  ASSERT_GT(expected.size(), 2u);
  int code = 0;
  const std::vector<std::string> answered =
      lines_of(capture_command("tabix " + path + " 2:" + std::to_string(from) + "-" + std::to_string(to), &code));
  EXPECT_EQ(code, 0);
  EXPECT_EQ(answered, expected);
}

}  // namespace
}  // namespace tamis::testing
