#include "genes.hpp"

#include <algorithm>
#include <cstdio>

#include "random.hpp"
#include "tamis/results_writer.hpp"

namespace tamis::simulation {
namespace {

constexpr std::uint64_t kGeneStream = 3;
constexpr std::uint64_t kCausalGeneStream = 4;
constexpr std::size_t kSmallestGene = 5;
constexpr std::size_t kLargestGene = 60;
constexpr double kGapChance = 0.5;
constexpr std::size_t kLongestGap = 15;
constexpr double kOverlapChance = 0.1;
constexpr std::size_t kLargestOverlap = 3;

std::string gene_name(std::size_t gene_idx) {
  char name[24];
  std::snprintf(name, sizeof name, "SRG%04zu", gene_idx + 1);
  return name;
}

}  // namespace

std::vector<SimulatedGene> lay_out_genes(const std::vector<std::vector<std::int64_t>>& positions,
                                         std::uint64_t seed) {
  Random random(stream_seed(seed, kGeneStream));
  std::vector<SimulatedGene> genes;
  std::size_t contig_first = 0;
  for (std::size_t contig = 0; contig < positions.size(); ++contig) {
    const std::size_t contig_end = contig_first + positions[contig].size();
    std::size_t first = contig_first;
    while (first + kSmallestGene <= contig_end) {
      const std::size_t size = kSmallestGene + random.index(kLargestGene - kSmallestGene + 1);
      const std::size_t last = std::min(first + size, contig_end) - 1;
      genes.push_back(SimulatedGene{gene_name(genes.size()), contig, first, last});
      std::size_t next = last + 1;
      if (random.bernoulli(kOverlapChance)) {
        next = std::max(first + 1, last + 1 - (1 + random.index(kLargestOverlap)));
      } else if (random.bernoulli(kGapChance)) {
        next += 1 + random.index(kLongestGap);
      }
      first = next;
    }
    contig_first = contig_end;
  }
  return genes;
}

void write_gene_bed(const std::vector<SimulatedGene>& genes, const std::vector<std::vector<std::int64_t>>& positions,
                    const std::string& path) {
  std::vector<std::size_t> contig_first(positions.size(), 0);
  for (std::size_t contig = 1; contig < positions.size(); ++contig) {
    contig_first[contig] = contig_first[contig - 1] + positions[contig - 1].size();
  }
  PlainTextFile bed(path);
  for (const SimulatedGene& gene : genes) {
    const std::vector<std::int64_t>& contig_positions = positions[gene.contig];
    const std::int64_t start = contig_positions[gene.first_variant - contig_first[gene.contig]] - 1;
    const std::int64_t end = contig_positions[gene.last_variant - contig_first[gene.contig]];
    bed.write(std::to_string(gene.contig + 1) + "\t" + std::to_string(start) + "\t" + std::to_string(end) + "\t" +
              gene.name + "\n");
  }
  bed.commit();
}

std::vector<std::size_t> choose_causal_genes(std::size_t gene_count, int count, std::uint64_t seed) {
  Random random(stream_seed(seed, kCausalGeneStream));
  std::vector<std::size_t> order(gene_count);
  for (std::size_t gene_idx = 0; gene_idx < gene_count; ++gene_idx) order[gene_idx] = gene_idx;
  // A partial Fisher-Yates shuffle: the first `count` places are a uniform draw.
  const std::size_t wanted = std::min(gene_count, static_cast<std::size_t>(std::max(0, count)));
  for (std::size_t place = 0; place < wanted; ++place) {
    std::swap(order[place], order[place + random.index(gene_count - place)]);
  }
  order.resize(wanted);
  std::sort(order.begin(), order.end());
  return order;
}

}  // namespace tamis::simulation
