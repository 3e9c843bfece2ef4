// `tamis simulate`'s genes: PREFIX.genes.bed laid over the simulated
// variants, --causal-genes planting rare-variant effects in a few of them,
// and the files of a cohort without --causal-genes unchanged by either.
#include <gtest/gtest.h>

#include <algorithm>
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

}  // namespace
}  // namespace tamis::testing
