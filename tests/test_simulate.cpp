// `tamis simulate`'s genes: PREFIX.genes.bed laid over the simulated
// variants, --causal-genes planting rare-variant effects in a few of them,
// and the files of a cohort without --causal-genes unchanged by either.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstdio>
#include <iostream>
#include <map>
#include <set>
#include <string>
#include <vector>

#include "support/test_support.hpp"
#include "tamis/errors.hpp"
#include "tamis/simulate.hpp"

namespace tamis::testing {
namespace {

struct BedGene {
  std::string contig, name;
  long long start = 0, end = 0;  // 0-based, half-open
};

std::vector<BedGene> read_bed(const std::string& path) {
  std::vector<BedGene> genes;
  for (const std::string& line : lines_of(read_text_file(path))) {
    const std::vector<std::string> fields = split_fields(line);
    EXPECT_EQ(fields.size(), 4u) << line;
    if (fields.size() != 4) continue;
    genes.push_back({fields[0], fields[3], std::stoll(fields[1]), std::stoll(fields[2])});
  }
  return genes;
}

// Each VCF record's contig, position and ALT allele share among the calls.
struct VcfSite {
  std::string contig;
  long long position = 0;
  double alt_share = 0;
};

std::vector<VcfSite> read_sites(const std::string& vcf_path) {
  std::vector<VcfSite> sites;
  for (const std::string& line : lines_of(read_gzip_file(vcf_path))) {
    if (line.empty() || line[0] == '#') continue;
    const std::vector<std::string> fields = split_fields(line);
    std::size_t alt = 0, called = 0;
    for (std::size_t field_idx = 9; field_idx < fields.size(); ++field_idx) {
      for (std::size_t allele_idx : {std::size_t{0}, std::size_t{2}}) {
        const char allele = fields[field_idx][allele_idx];
        if (allele == '.') continue;
        ++called;
        alt += allele == '1';
      }
    }
    sites.push_back({fields[0], std::stoll(fields[1]), called ? static_cast<double>(alt) / called : 0.0});
  }
  return sites;
}

SimulationOutputs simulate(const std::string& prefix, std::uint64_t seed, int samples, int variants,
                           int causal_genes = 0) {
  SimulationOptions options;
  options.out_prefix = prefix;
  options.seed = seed;
  options.samples = samples;
  options.variants = variants;
  options.causal_genes = causal_genes;
  return simulate_cohort(options);
}

class SimulatedGenes : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("simulate_genes");
    plain_ = simulate(dir_ + "/plain", 12, 300, 3000);
    planted_ = simulate(dir_ + "/planted", 12, 300, 3000, 4);
  }
  static std::string dir_;
  static SimulationOutputs plain_, planted_;
};
std::string SimulatedGenes::dir_;
SimulationOutputs SimulatedGenes::plain_, SimulatedGenes::planted_;

TEST_F(SimulatedGenes, GenesAreWindowsOfFiveToSixtyVariantsWithGapsAndOverlaps) {
  ASSERT_EQ(plain_.genes_path, dir_ + "/plain.genes.bed");
  const std::vector<BedGene> genes = read_bed(plain_.genes_path);
  const std::vector<VcfSite> sites = read_sites(plain_.vcf_path);
  ASSERT_GT(genes.size(), 40u);
  std::set<long long> covered_idx;
  std::size_t overlaps = 0;
  for (std::size_t gene_idx = 0; gene_idx < genes.size(); ++gene_idx) {
    const BedGene& gene = genes[gene_idx];
    char expected_name[16];
    std::snprintf(expected_name, sizeof expected_name, "SRG%04zu", gene_idx + 1);
    EXPECT_EQ(gene.name, expected_name);
    // BED is 0-based and half-open: the gene's first variant sits at start + 1, its last at end.
    std::size_t inside = 0;
    bool first_at_start = false, last_at_end = false;
    for (std::size_t site_idx = 0; site_idx < sites.size(); ++site_idx) {
      const VcfSite& site = sites[site_idx];
      if (site.contig != gene.contig || site.position <= gene.start || site.position > gene.end) continue;
      ++inside;
      first_at_start |= site.position == gene.start + 1;
      last_at_end |= site.position == gene.end;
      if (!covered_idx.insert(static_cast<long long>(site_idx)).second) ++overlaps;
    }
    EXPECT_GE(inside, 5u) << gene.name;
    EXPECT_LE(inside, 60u) << gene.name;
    EXPECT_TRUE(first_at_start && last_at_end) << gene.name << " spans exactly its variants";
    if (gene_idx > 0 && genes[gene_idx - 1].contig == gene.contig) {
      EXPECT_GT(gene.start, genes[gene_idx - 1].start) << "genes in order of start";
    }
  }
  EXPECT_GT(overlaps, 0u) << "some genes share variants with their neighbour";
  EXPECT_LT(covered_idx.size(), sites.size()) << "some variants lie between genes";
  EXPECT_GT(covered_idx.size(), sites.size() / 2);
}

TEST_F(SimulatedGenes, CausalGenesChangeOnlyTraitsAndTruth) {
  EXPECT_EQ(read_gzip_file(plain_.vcf_path), read_gzip_file(planted_.vcf_path)) << "the genotypes stay";
  EXPECT_EQ(read_text_file(plain_.genes_path), read_text_file(planted_.genes_path));
  EXPECT_NE(read_text_file(plain_.table_path), read_text_file(planted_.table_path));

  const std::vector<std::string> plain_truth = lines_of(read_text_file(plain_.truth_path));
  const std::vector<std::string> truth = lines_of(read_text_file(planted_.truth_path));
  EXPECT_EQ(plain_truth.at(0), "trait\tchromosome\tposition\teffect");
  ASSERT_EQ(truth.at(0), "trait\tchromosome\tposition\teffect\tgene");
  // The single planted variants come first, as before, with no gene.
  for (std::size_t line_idx = 1; line_idx < plain_truth.size(); ++line_idx) {
    EXPECT_EQ(truth.at(line_idx), plain_truth[line_idx] + "\t#NA");
  }

  std::map<std::string, BedGene> gene_of_name;
  for (const BedGene& gene : read_bed(planted_.genes_path)) gene_of_name[gene.name] = gene;
  std::map<std::string, double> alt_share_at;
  for (const VcfSite& site : read_sites(planted_.vcf_path)) {
    alt_share_at[site.contig + ":" + std::to_string(site.position)] = site.alt_share;
  }
  std::set<std::string> causal_genes;
  std::map<std::string, int> traits_of_carrier;
  for (std::size_t line_idx = plain_truth.size(); line_idx < truth.size(); ++line_idx) {
    const std::vector<std::string> fields = split_fields(truth[line_idx]);
    ASSERT_EQ(fields.size(), 5u);
    ASSERT_EQ(gene_of_name.count(fields[4]), 1u) << fields[4] << " is a gene of the BED";
    const BedGene& gene = gene_of_name[fields[4]];
    const long long position = std::stoll(fields[2]);
    EXPECT_TRUE(fields[1] == gene.contig && position > gene.start && position <= gene.end) << truth[line_idx];
    EXPECT_LT(alt_share_at.at(fields[1] + ":" + fields[2]), 0.05) << "carriers are rare variants";
    const double effect = std::stod(fields[3]);
    EXPECT_DOUBLE_EQ(std::abs(effect), fields[0] == "fev1_litres" ? 0.35 : 1.0);
    causal_genes.insert(fields[4]);
    ++traits_of_carrier[fields[1] + ":" + fields[2]];
  }
  EXPECT_GE(causal_genes.size(), 2u);
  EXPECT_LE(causal_genes.size(), 4u);
  for (const auto& [place, traits] : traits_of_carrier) EXPECT_EQ(traits, 2) << place << ": both traits";
}

// md5sum (coreutils) of the files that the simulator wrote for this cohort
// before it had genes (commit 6bd7ed4; the VCF decompressed, as its BGZF
// bytes depend on the deflate library). Genes and their effects draw from
// random streams of their own, so nothing else may change.
TEST(SimulatedCohort, FilesWithoutCausalGenesAreThoseOfBefore) {
  const std::string dir = make_temp_dir("simulate_pinned");
  const SimulationOutputs outputs = simulate(dir + "/pin", 4, 100, 200);
  EXPECT_EQ(capture_command("gzip -dc " + outputs.vcf_path + " | md5sum"), "be43b56cadcbea966eb92d092bc91d4d  -\n");
  EXPECT_EQ(capture_command("md5sum < " + outputs.table_path), "db7761162e80947d24a5e49aaeea194a  -\n");
  EXPECT_EQ(capture_command("md5sum < " + outputs.truth_path), "8f557fa334f395ff392cc6b97768a30e  -\n");
  EXPECT_TRUE(file_exists(outputs.genes_path));
}

TEST(SimulatedCohort, CausalGeneCountIsChecked) {
  const std::string dir = make_temp_dir("simulate_gene_count");
  for (int count : {-1, 1000}) {
    try {
      simulate(dir + "/bad", 4, 100, 200, count);
      ADD_FAILURE() << "--causal-genes " << count << " was accepted";
    } catch (const Error& error) {
      EXPECT_EQ(error.code(), ExitCode::usage);
      EXPECT_NE(std::string(error.what()).find("--causal-genes"), std::string::npos) << error.what();
    }
  }
}

// --haplotype-blocks and --locus-signals: r² computed directly from the
// VCF's genotype calls (Pearson's correlation of allele counts, squared,
// over the samples called at both variants).
struct CalledGenotypes {
  std::vector<std::string> contig;
  std::vector<long long> position;
  std::vector<std::vector<int>> counts;  // -1 where the call is missing
  std::vector<bool> common;             // biallelic, minor allele frequency at least 5%
};

CalledGenotypes read_called_genotypes(const std::string& vcf_path) {
  CalledGenotypes called;
  for (const std::string& line : lines_of(read_gzip_file(vcf_path))) {
    if (line.empty() || line[0] == '#') continue;
    const std::vector<std::string> fields = split_fields(line);
    std::vector<int> counts;
    double alleles = 0, alt = 0;
    for (std::size_t field_idx = 9; field_idx < fields.size(); ++field_idx) {
      const std::string& call = fields[field_idx];
      if (call[0] == '.') {
        counts.push_back(-1);
        continue;
      }
      counts.push_back((call[0] == '1') + (call[2] == '1'));
      alleles += 2;
      alt += counts.back();
    }
    const double frequency = alt / alleles;
    called.contig.push_back(fields[0]);
    called.position.push_back(std::stoll(fields[1]));
    called.counts.push_back(std::move(counts));
    called.common.push_back(fields[4].find(',') == std::string::npos && std::min(frequency, 1 - frequency) >= 0.05);
  }
  return called;
}

double squared_correlation(const std::vector<int>& first, const std::vector<int>& second) {
  double count = 0, sum_first = 0, sum_second = 0;
  for (std::size_t sample_idx = 0; sample_idx < first.size(); ++sample_idx) {
    if (first[sample_idx] < 0 || second[sample_idx] < 0) continue;
    ++count;
    sum_first += first[sample_idx];
    sum_second += second[sample_idx];
  }
  const double mean_first = sum_first / count, mean_second = sum_second / count;
  double cross = 0, square_first = 0, square_second = 0;
  for (std::size_t sample_idx = 0; sample_idx < first.size(); ++sample_idx) {
    if (first[sample_idx] < 0 || second[sample_idx] < 0) continue;
    cross += (first[sample_idx] - mean_first) * (second[sample_idx] - mean_second);
    square_first += (first[sample_idx] - mean_first) * (first[sample_idx] - mean_first);
    square_second += (second[sample_idx] - mean_second) * (second[sample_idx] - mean_second);
  }
  return cross * cross / (square_first * square_second);
}

SimulationOptions block_options(const std::string& prefix, int locus_signals) {
  SimulationOptions options;
  options.out_prefix = prefix;
  options.seed = 5;
  options.samples = 1000;
  options.variants = 1200;
  options.chromosomes = 2;
  options.haplotype_block_variants = 20;
  options.locus_signals = locus_signals;
  return options;
}

class SimulatedBlocks : public ::testing::Test {
 protected:
  static void SetUpTestSuite() {
    dir_ = make_temp_dir("simulate_blocks");
    outputs_ = simulate_cohort(block_options(dir_ + "/blocks", 3));
    called_ = read_called_genotypes(outputs_.vcf_path);
    // Each variant's block, from the BED.
    const std::vector<BedGene> blocks = read_bed(outputs_.blocks_path);
    for (std::size_t variant_idx = 0; variant_idx < called_.position.size(); ++variant_idx) {
      int found = -1;
      for (std::size_t block_idx = 0; block_idx < blocks.size(); ++block_idx) {
        const BedGene& block = blocks[block_idx];
        const long long position = called_.position[variant_idx];
        if (block.contig == called_.contig[variant_idx] && position > block.start && position <= block.end) {
          EXPECT_EQ(found, -1) << "variant " << variant_idx << " lies in one block only";
          found = static_cast<int>(block_idx);
        }
      }
      block_of_.push_back(found);
    }
    block_count_ = blocks.size();
  }
  static std::string dir_;
  static SimulationOutputs outputs_;
  static CalledGenotypes called_;
  static std::vector<int> block_of_;
  static std::size_t block_count_;
};
std::string SimulatedBlocks::dir_;
SimulationOutputs SimulatedBlocks::outputs_;
CalledGenotypes SimulatedBlocks::called_;
std::vector<int> SimulatedBlocks::block_of_;
std::size_t SimulatedBlocks::block_count_ = 0;

TEST_F(SimulatedBlocks, BlocksCoverTheVariantsInOrder) {
  ASSERT_EQ(outputs_.blocks_path, dir_ + "/blocks.blocks.bed");
  const std::vector<BedGene> blocks = read_bed(outputs_.blocks_path);
  for (std::size_t block_idx = 0; block_idx < blocks.size(); ++block_idx) {
    char expected_name[32];
    std::snprintf(expected_name, sizeof expected_name, "SRB%04zu", block_idx + 1);
    EXPECT_EQ(blocks[block_idx].name, expected_name);
  }
  for (std::size_t variant_idx = 0; variant_idx < block_of_.size(); ++variant_idx) {
    ASSERT_GE(block_of_[variant_idx], 0) << "variant " << variant_idx << " lies in a block";
    if (variant_idx > 0) {
      EXPECT_GE(block_of_[variant_idx], block_of_[variant_idx - 1]);
    }
  }
  const double mean_variants = static_cast<double>(block_of_.size()) / static_cast<double>(block_count_);
  EXPECT_GT(mean_variants, 12.0);  // asked for 20 on average
  EXPECT_LT(mean_variants, 30.0);
}

TEST_F(SimulatedBlocks, NeighboursInABlockAreInLdAndBlocksAreNearlyIndependent) {
  std::vector<double> within, across;
  for (std::size_t variant_idx = 0; variant_idx + 1 < block_of_.size(); ++variant_idx) {
    if (!called_.common[variant_idx] || !called_.common[variant_idx + 1]) continue;
    if (called_.contig[variant_idx] != called_.contig[variant_idx + 1]) continue;
    const double r2 = squared_correlation(called_.counts[variant_idx], called_.counts[variant_idx + 1]);
    (block_of_[variant_idx] == block_of_[variant_idx + 1] ? within : across).push_back(r2);
  }
  // Pairs of common variants far apart: every 7th against the one 200 further on.
  std::vector<double> distant;
  for (std::size_t variant_idx = 0; variant_idx + 200 < block_of_.size(); variant_idx += 7) {
    if (!called_.common[variant_idx] || !called_.common[variant_idx + 200]) continue;
    distant.push_back(squared_correlation(called_.counts[variant_idx], called_.counts[variant_idx + 200]));
  }
  ASSERT_GT(within.size(), 200u);
  ASSERT_GT(across.size(), 10u);
  ASSERT_GT(distant.size(), 10u);
  auto mean_of = [](const std::vector<double>& values) {
    double total = 0;
    for (double value : values) total += value;
    return total / static_cast<double>(values.size());
  };
  std::vector<double> sorted_within = within;
  std::sort(sorted_within.begin(), sorted_within.end());
  const double median_within = sorted_within[sorted_within.size() / 2];
  std::cout << "[ ld ] neighbours' r² within blocks: mean " << mean_of(within) << ", median " << median_within
            << " (" << within.size() << " pairs); across a block boundary: mean " << mean_of(across) << " ("
            << across.size() << "); 200 variants apart: mean " << mean_of(distant) << " (" << distant.size()
            << ")\n";
  EXPECT_GT(mean_of(within), 0.45);
  EXPECT_GT(median_within, 0.7);
  // Independent blocks: r² of about 1/n = 0.001 by chance, a little more
  // from the founding groups' frequency differences.
  EXPECT_LT(mean_of(across), 0.01);
  EXPECT_LT(*std::max_element(across.begin(), across.end()), 0.05);
  EXPECT_LT(mean_of(distant), 0.01);
}

TEST_F(SimulatedBlocks, LocusSignalsAreCausalAndInPartialLd) {
  const std::vector<std::string> truth = lines_of(read_text_file(outputs_.truth_path));
  // The locus's three signals come first, with the same effect.
  std::vector<std::size_t> signals;
  for (std::size_t line_idx = 1; line_idx <= 3; ++line_idx) {
    const std::vector<std::string> fields = split_fields(truth.at(line_idx));
    EXPECT_EQ(fields.at(0), "fev1_litres");
    EXPECT_EQ(fields.at(3), split_fields(truth.at(1)).at(3)) << "the same effect";
    for (std::size_t variant_idx = 0; variant_idx < called_.position.size(); ++variant_idx) {
      if (called_.contig[variant_idx] == fields[1] && called_.position[variant_idx] == std::stoll(fields[2])) {
        signals.push_back(variant_idx);
      }
    }
  }
  ASSERT_EQ(signals.size(), 3u);
  for (std::size_t first = 0; first < 3; ++first) {
    EXPECT_TRUE(called_.common[signals[first]]);
    EXPECT_EQ(block_of_[signals[first]], block_of_[signals[0]]) << "one block";
    for (std::size_t second = first + 1; second < 3; ++second) {
      // r² = 0.336 by the haplotypes' frequencies, less the noise.
      const double r2 = squared_correlation(called_.counts[signals[first]], called_.counts[signals[second]]);
      std::cout << "[ ld ] r² between locus signals " << first + 1 << " and " << second + 1 << ": " << r2 << "\n";
      EXPECT_GT(r2, 0.2);
      EXPECT_LT(r2, 0.45);
    }
  }
}

TEST(SimulatedCohort, BlocksLeaveTheGenesAndTheirOptionsAreChecked) {
  const std::string dir = make_temp_dir("simulate_block_options");
  const SimulationOptions options = block_options(dir + "/blocks", 0);
  SimulationOptions plain_options = options;
  plain_options.out_prefix = dir + "/plain";
  plain_options.haplotype_block_variants = 0;
  const SimulationOutputs plain = simulate_cohort(plain_options);
  EXPECT_TRUE(plain.blocks_path.empty());
  const SimulationOutputs blocks = simulate_cohort(options);
  EXPECT_EQ(read_text_file(plain.genes_path), read_text_file(blocks.genes_path));
  EXPECT_NE(read_gzip_file(plain.vcf_path), read_gzip_file(blocks.vcf_path));

  auto expect_refused = [&](int block_variants, int locus_signals, int causal, const std::string& option) {
    SimulationOptions bad = options;
    bad.out_prefix = dir + "/bad";
    bad.haplotype_block_variants = block_variants;
    bad.locus_signals = locus_signals;
    bad.causal_per_trait = causal;
    try {
      simulate_cohort(bad);
      ADD_FAILURE() << "blocks " << block_variants << ", locus signals " << locus_signals << " accepted";
    } catch (const Error& error) {
      EXPECT_EQ(error.code(), ExitCode::usage);
      EXPECT_NE(std::string(error.what()).find(option), std::string::npos) << error.what();
    }
  };
  expect_refused(-1, 0, 6, "--haplotype-blocks");
  expect_refused(0, 2, 6, "--locus-signals needs --haplotype-blocks");
  expect_refused(20, 4, 6, "--locus-signals");
  expect_refused(20, 2, 0, "--locus-signals");
}

}  // namespace
}  // namespace tamis::testing
