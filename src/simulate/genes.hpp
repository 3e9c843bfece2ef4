// The simulated cohort's genes: invented names ("SRG" and a number) on
// consecutive windows of the simulated variants, written as PREFIX.genes.bed
// for `scan --sets`.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace tamis::simulation {

struct SimulatedGene {
  std::string name;
  std::size_t contig = 0;         // 0-based; the VCF's contig is contig + 1
  std::size_t first_variant = 0;  // genome-wide variant indices, inclusive
  std::size_t last_variant = 0;
};

// Windows of 5 to 60 consecutive variants along each contig; about half the
// genes are followed by a gap of 1 to 15 variants that no gene covers, and
// about one in ten overlaps the next by 1 to 3 variants. `positions` holds
// each contig's variant positions; genes come in genome order (by first
// variant). Draws from a random stream of its own, so that the cohort
// itself does not change.
std::vector<SimulatedGene> lay_out_genes(const std::vector<std::vector<std::int64_t>>& positions,
                                         std::uint64_t seed);

// BED (0-based, half-open): contig, first variant's position - 1, last
// variant's position, name.
void write_gene_bed(const std::vector<SimulatedGene>& genes, const std::vector<std::vector<std::int64_t>>& positions,
                    const std::string& path);

// `count` genes chosen at random (distinct, in genome order); all of them
// when there are no more than `count`.
std::vector<std::size_t> choose_causal_genes(std::size_t gene_count, int count, std::uint64_t seed);

}  // namespace tamis::simulation
