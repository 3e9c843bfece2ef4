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
#include <functional>
#include <memory>
#include <string>
#include <utility>
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
// (Manichaikul et al. 2010, Bioinformatics 26:2867-2873): phi >= 2^-1.5
// duplicate or identical twin, >= 2^-2.5 first degree, >= 2^-3.5 second,
// >= 2^-4.5 third. Inline, so that the file writer labels rows without
// linking the statistics.
enum class RelationshipDegree { duplicate, first, second, third, unrelated };

inline RelationshipDegree degree_of(double relatedness) {
  const double kinship = relatedness / 2.0;
  if (kinship >= 0.3535533905932738) return RelationshipDegree::duplicate;  // 2^-1.5
  if (kinship >= 0.1767766952966369) return RelationshipDegree::first;      // 2^-2.5
  if (kinship >= 0.08838834764831845) return RelationshipDegree::second;     // 2^-3.5
  if (kinship >= 0.04419417382415922) return RelationshipDegree::third;      // 2^-4.5
  return RelationshipDegree::unrelated;
}

inline const char* degree_label(RelationshipDegree degree) {
  switch (degree) {
    case RelationshipDegree::duplicate: return "duplicate_or_twin";
    case RelationshipDegree::first: return "first_degree";
    case RelationshipDegree::second: return "second_degree";
    case RelationshipDegree::third: return "third_degree";
    case RelationshipDegree::unrelated: break;
  }
  return "beyond_third";
}

// The label of a diagonal entry (a sample with itself).
inline constexpr const char* kSelfLabel = "self";

// The tiles of sample pairs: square blocks of `tile_size` samples, the
// upper triangle (row tile <= column tile) numbered row by row. Share
// `part` (1-based) of `part_count` holds tiles [first_tile, end_tile), so
// that the shares are near-equal in tiles and together hold each tile once.
struct TileShare {
  std::size_t tile_rows = 0;   // tiles along one side
  std::size_t first_tile = 0;
  std::size_t end_tile = 0;
};
TileShare plan_tile_share(std::size_t sample_count, std::size_t tile_size, int part, int part_count);

class GrmAccumulator {
 public:
  // Tiles of this many samples by default: a tile's product then runs at
  // the speed of a large one, and a tile of sums (512 KiB) stays in cache.
  static constexpr std::size_t kDefaultTileSize = 256;

  // Accumulates the tiles of share `part` (1-based) of `part_count`
  // near-equal shares of the upper-triangle pair tiles of `sample_count`
  // samples. Throws std::bad_alloc when the share's tiles do not fit.
  GrmAccumulator(std::size_t sample_count, int part, int part_count,
                 std::size_t tile_size = kDefaultTileSize);
  ~GrmAccumulator();
  GrmAccumulator(GrmAccumulator&&) noexcept;
  GrmAccumulator& operator=(GrmAccumulator&&) noexcept;

  // Markers per add_markers call that keep a block's standardised copy near
  // 128 MiB (between 64 and 256). Not a requirement: any width works, but
  // results are bit-for-bit the same only for the same blocks.
  static std::size_t preferred_block_width(std::size_t sample_count);

  // `dosages` is sample_count x width, marker-major (marker m's values are
  // dosages[m * sample_count + s]), alternate-allele dosages in [0, 2], NaN
  // where missing. Each marker's p is its mean dosage / 2 over the samples
  // that have it. Markers with p = 0 or 1 (or no calls) add nothing. The
  // tiles are computed in parallel (oneTBB), each by one task in a fixed
  // order, so the sums do not depend on the number of threads.
  void add_markers(const double* dosages, std::size_t width);

  std::size_t sample_count() const;
  // Markers that added something.
  std::uint64_t marker_count() const;
  // Per sample: the markers it has a call for (its diagonal's M).
  std::vector<std::uint64_t> called_markers() const;
  const TileShare& share() const;
  // Samples whose diagonal entry belongs to this share: [first, end)
  // (first = end when the share holds no diagonal tile).
  std::pair<std::size_t, std::size_t> diagonal_samples() const;

  // This share's entries, in a fixed order (by first, then second): every
  // diagonal entry whose sample's tile is in the share (NaN for a sample
  // without any called marker), and every off-diagonal pair with at least
  // one shared marker whose relatedness is at least keep_above. Visiting
  // them holds none in memory (all pairs of a large share would weigh more
  // than the tiles).
  void visit_entries(double keep_above, const std::function<void(const RelatednessEntry&)>& visit) const;
  std::vector<RelatednessEntry> entries(double keep_above) const;

 private:
  struct State;
  std::unique_ptr<State> state_;
};

}  // namespace tamis
