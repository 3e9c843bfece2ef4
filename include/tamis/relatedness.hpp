// The genomic relationship matrix (GRM) from marker dosages: blocked
// products of standardised marker blocks, accumulated in tiles of sample
// pairs. Pure computation: no I/O (the `tamis relatedness` command reads the
// genotypes and writes PREFIX.relatedness.tsv.gz).
//
// A_jk = (1/M_jk) sum_i (x_ij - 2 p_i)(x_ik - 2 p_i) / (2 p_i (1 - p_i)) over
// the M_jk markers that both samples have (Yang et al. 2011, AJHG 88:76-82);
// the diagonal, by the same formula, estimates 1 + F.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

namespace tamis {

// Relatedness among `sample_count` samples numbered 0..n-1: a symmetric
// matrix with the diagonal given in full and each nonzero off-diagonal pair
// listed once (first < second, no pair twice).
struct RelatednessPair {
  std::uint32_t first = 0;
  std::uint32_t second = 0;
  double value = 0.0;
};

struct SparseRelatedness {
  std::size_t sample_count = 0;
  std::vector<double> diagonal;          // sample_count values (1 where nothing else is known)
  std::vector<RelatednessPair> pairs;    // off-diagonal, first < second
};

// One entry of the matrix: a pair of samples (first <= second; equal on the
// diagonal), its relatedness and the number of markers both samples have.
struct RelatednessEntry {
  std::uint32_t first = 0;
  std::uint32_t second = 0;
  double relatedness = 0.0;
  std::uint64_t markers = 0;
};

// Relationship degree from the kinship phi = A / 2 by the usual cut-offs
// (Manichaikul et al. 2010, Bioinformatics 26:2867-2873).
enum class RelationshipDegree { duplicate, first, second, third, unrelated };
RelationshipDegree degree_of(double relatedness);
const char* degree_label(RelationshipDegree degree);

class GrmAccumulator {
 public:
  // Accumulates the tiles of share `part` (1-based) of `part_count`
  // near-equal shares of the upper-triangle pair tiles of `sample_count`
  // samples.
  GrmAccumulator(std::size_t sample_count, int part, int part_count);

  // `dosages` is sample_count x width, marker-major (marker m's values are
  // dosages[m * sample_count + s]), alternate-allele dosages in [0, 2], NaN
  // where missing. Each marker's p is its mean dosage / 2 over the samples
  // that have it. Markers with p = 0 or 1 add nothing.
  void add_markers(const double* dosages, std::size_t width);

  std::uint64_t marker_count() const;

  // This share's entries, in a fixed order (by first, then second): every
  // diagonal entry whose sample's tile is in the share, and every
  // off-diagonal pair whose relatedness is at least keep_above.
  std::vector<RelatednessEntry> entries(double keep_above) const;
};

}  // namespace tamis
