// Linkage disequilibrium for `tamis simulate --haplotype-blocks N`.
//
// Each contig is cut into blocks of about N consecutive variants (lengths
// drawn from an exponential distribution, at least one variant), as if
// recombination fell only between blocks. A block holds 4 to 8 founder
// haplotypes with frequencies of their own in each founding group, related
// by a random genealogy: a common variant is carried by the haplotypes below
// one branch of it (or, for a third of the variants, by the others), and
// often by the same branch as its neighbour, so that neighbours are in strong
// LD, variants further apart in the block in partial LD, and variants of
// different blocks close to none. A rare variant sits on one haplotype and is
// carried by a small share of its copies. Noise keeps LD below perfect: a
// founder's chromosome switches to a fresh haplotype between two variants
// with a small probability (an old recombination), and a common allele is
// flipped with a small probability (recurrent mutation, genotyping error).
//
// --locus-signals K (1 to 3) builds the block around the first planted
// variant of fev1_litres from eight haplotypes that carry K causal variants
// in partial LD with each other (r² about 0.3 by construction; 0.2 to 0.4
// in the genotypes), and makes the other K - 1 of them causal too; the
// block's other variants tag one signal closely or several loosely.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "random.hpp"

namespace tamis::simulation {

// The locus with several signals: its block and its signal variants
// (genome-wide indices; the first is the planted variant it is built around).
struct SignalLocus {
  std::size_t first_variant = 0;
  std::size_t last_variant = 0;
  std::vector<std::size_t> signal_variants;
};

// Where the locus block and its signals go around `anchor` (a planted
// variant), or an empty list of signals if the contig holding `anchor` is
// too short for them. `contig_first` and `contig_size` describe that contig.
SignalLocus place_signal_locus(std::size_t anchor, int signals, std::size_t contig_first,
                               std::size_t contig_size);

class HaplotypeBlocks {
 public:
  // `positions` holds each contig's variant positions; the blocks' draws
  // come from a random stream of their own.
  HaplotypeBlocks(const std::vector<std::vector<std::int64_t>>& positions, double mean_variants,
                  const SignalLocus& locus, std::uint64_t seed);

  // Fixes which haplotypes carry variant `variant_idx` (variants in genome
  // order). A rare variant aims at `rare_frequency`; a planted one is common,
  // and a signal of the locus carries its own allele.
  void start_variant(std::size_t variant_idx, bool rare, double rare_frequency, bool planted);

  // The current variant's expected ALT frequency for a person of `ancestry`
  // (share of founding group A).
  double expected_frequency(double ancestry) const;

  // A founder's two alleles (0 or 1) at the current variant. `haplotypes`
  // holds the founder's state: which haplotype each chromosome copy carries.
  void draw_founder_alleles(double ancestry, Random& random, std::array<int, 2>& haplotypes, int* alleles) const;

  // BED (0-based, half-open): contig, first variant's position - 1, last
  // variant's position, name (SRB0001, ...).
  void write_bed(const std::vector<std::vector<std::int64_t>>& positions, const std::string& path) const;

 private:
  struct Block {
    std::size_t contig = 0;
    std::size_t first_variant = 0;  // genome-wide indices, inclusive
    std::size_t last_variant = 0;
    std::vector<double> frequency_a;  // haplotype frequencies in each founding group
    std::vector<double> frequency_b;
    std::vector<std::uint32_t> branches;  // haplotype masks below each branch of the genealogy
    bool signal_locus = false;
  };

  void lay_out(const std::vector<std::vector<std::int64_t>>& positions, double mean_variants);
  void draw_haplotypes(Block& block);
  void build_signal_locus(Block& block);
  std::uint32_t choose_common_mask(const Block& block, bool planted);
  int draw_haplotype(double ancestry, Random& random) const;

  Random random_;
  SignalLocus locus_;
  std::vector<Block> blocks_;
  std::size_t block_idx_ = 0;       // the block of the current variant
  bool block_start_ = false;        // the current variant opens its block
  std::uint32_t mask_ = 0;          // haplotypes carrying the current common variant
  std::uint32_t previous_mask_ = 0;  // the block's last common variant's, 0 at a block's start
  int rare_haplotype_ = -1;         // the current rare variant's haplotype, -1 for a common one
  double rare_share_ = 0.0;         // the share of that haplotype's copies carrying it
};

}  // namespace tamis::simulation
