// The relatedness accumulator on small matrices: against the formula taken
// pair by pair, tiles and shares against the whole, missing calls, threads.
#include <gtest/gtest.h>
#include <tbb/global_control.h>

#include <cmath>
#include <cstring>
#include <limits>
#include <random>
#include <vector>

#include "tamis/relatedness.hpp"

namespace tamis {
namespace {

const double kMissing = std::numeric_limits<double>::quiet_NaN();

// Marker-major dosages: `markers` columns of `samples` values, a share of them missing.
std::vector<double> random_dosages(std::size_t samples, std::size_t markers, double missing_rate,
                                   std::uint32_t seed) {
  std::mt19937 random(seed);
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  std::vector<double> dosages(samples * markers);
  for (std::size_t marker_idx = 0; marker_idx < markers; ++marker_idx) {
    const double frequency = 0.05 + 0.9 * uniform(random);
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      const double value = (uniform(random) < frequency) + (uniform(random) < frequency);
      dosages[marker_idx * samples + sample_idx] = uniform(random) < missing_rate ? kMissing : value;
    }
  }
  return dosages;
}

// A_jk and M_jk straight from the definition (Yang et al. 2011, AJHG
// 88:76-82), one pair at a time: the oracle the blocked products must meet.
struct DirectEstimate {
  std::vector<double> relatedness;  // samples x samples
  std::vector<std::uint64_t> markers;
};

DirectEstimate estimate_directly(const std::vector<double>& dosages, std::size_t samples) {
  const std::size_t markers = dosages.size() / samples;
  DirectEstimate estimate{std::vector<double>(samples * samples, 0.0), std::vector<std::uint64_t>(samples * samples, 0)};
  for (std::size_t marker_idx = 0; marker_idx < markers; ++marker_idx) {
    const double* values = dosages.data() + marker_idx * samples;
    double sum = 0.0;
    std::size_t called = 0;
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      if (!std::isnan(values[sample_idx])) {
        sum += values[sample_idx];
        ++called;
      }
    }
    if (called == 0) continue;
    const double p = sum / (2.0 * called);
    if (p <= 0.0 || p >= 1.0) continue;
    for (std::size_t first = 0; first < samples; ++first) {
      for (std::size_t second = 0; second < samples; ++second) {
        if (std::isnan(values[first]) || std::isnan(values[second])) continue;
        estimate.relatedness[first * samples + second] +=
            (values[first] - 2 * p) * (values[second] - 2 * p) / (2 * p * (1 - p));
        ++estimate.markers[first * samples + second];
      }
    }
  }
  for (std::size_t pair = 0; pair < samples * samples; ++pair) {
    if (estimate.markers[pair]) estimate.relatedness[pair] /= static_cast<double>(estimate.markers[pair]);
  }
  return estimate;
}

std::vector<RelatednessEntry> accumulate(const std::vector<double>& dosages, std::size_t samples, int part,
                                         int part_count, std::size_t tile_size, std::size_t block_width,
                                         double keep_above) {
  GrmAccumulator accumulator(samples, part, part_count, tile_size);
  const std::size_t markers = dosages.size() / samples;
  for (std::size_t start = 0; start < markers; start += block_width) {
    accumulator.add_markers(dosages.data() + start * samples, std::min(block_width, markers - start));
  }
  return accumulator.entries(keep_above);
}

bool same_bits(const std::vector<RelatednessEntry>& left, const std::vector<RelatednessEntry>& right) {
  if (left.size() != right.size()) return false;
  for (std::size_t entry_idx = 0; entry_idx < left.size(); ++entry_idx) {
    const RelatednessEntry& a = left[entry_idx];
    const RelatednessEntry& b = right[entry_idx];
    if (a.first != b.first || a.second != b.second || a.markers != b.markers ||
        std::memcmp(&a.relatedness, &b.relatedness, sizeof(double)) != 0) {
      return false;
    }
  }
  return true;
}

void expect_matches_direct(const std::vector<double>& dosages, std::size_t samples, std::size_t tile_size,
                           std::size_t block_width) {
  const DirectEstimate direct = estimate_directly(dosages, samples);
  const std::vector<RelatednessEntry> entries =
      accumulate(dosages, samples, 1, 1, tile_size, block_width, -std::numeric_limits<double>::infinity());
  ASSERT_EQ(entries.size(), samples * (samples + 1) / 2);  // every pair kept, each once
  std::size_t entry_idx = 0;
  for (std::size_t first = 0; first < samples; ++first) {
    for (std::size_t second = first; second < samples; ++second, ++entry_idx) {
      const RelatednessEntry& entry = entries[entry_idx];
      ASSERT_EQ(entry.first, first);
      ASSERT_EQ(entry.second, second);
      EXPECT_EQ(entry.markers, direct.markers[first * samples + second]) << first << "," << second;
      EXPECT_NEAR(entry.relatedness, direct.relatedness[first * samples + second], 1e-12) << first << "," << second;
    }
  }
}

TEST(GrmAccumulator, MatchesTheFormulaPairByPair) {
  expect_matches_direct(random_dosages(37, 150, 0.0, 1), 37, 8, 64);
}

TEST(GrmAccumulator, CountsTheMarkersEachPairShares) {
  // 3% missing: co-missing pairs counted one by one.
  expect_matches_direct(random_dosages(41, 130, 0.03, 2), 41, 9, 50);
  // 45% missing: co-missing pairs from a product of indicator blocks.
  expect_matches_direct(random_dosages(41, 130, 0.45, 3), 41, 9, 50);
}

TEST(GrmAccumulator, MarkersWithoutVariationAddNothing) {
  const std::size_t samples = 12;
  std::vector<double> dosages = random_dosages(samples, 20, 0.0, 4);
  std::vector<double> with_flat = dosages;
  with_flat.insert(with_flat.end(), samples, 0.0);        // all reference
  with_flat.insert(with_flat.end(), samples, 2.0);        // all alternate
  with_flat.insert(with_flat.end(), samples, kMissing);   // no calls
  GrmAccumulator accumulator(samples, 1, 1, 5);
  accumulator.add_markers(with_flat.data(), with_flat.size() / samples);
  EXPECT_EQ(accumulator.marker_count(), 20u);
  EXPECT_TRUE(same_bits(accumulator.entries(-1e9), accumulate(dosages, samples, 1, 1, 5, 20, -1e9)));
}

TEST(GrmAccumulator, SharesOfTilesTogetherAreTheWhole) {
  const std::size_t samples = 53;
  const std::vector<double> dosages = random_dosages(samples, 90, 0.02, 5);
  const std::vector<RelatednessEntry> whole = accumulate(dosages, samples, 1, 1, 7, 40, -0.01);
  for (int part_count : {2, 5, 36, 40}) {  // 8 x 8 tiles: 36 in the upper triangle
    std::vector<RelatednessEntry> joined;
    std::size_t diagonal_seen = 0;
    for (int part = 1; part <= part_count; ++part) {
      std::vector<RelatednessEntry> share = accumulate(dosages, samples, part, part_count, 7, 40, -0.01);
      for (const RelatednessEntry& entry : share) diagonal_seen += entry.first == entry.second;
      joined.insert(joined.end(), share.begin(), share.end());
    }
    EXPECT_EQ(diagonal_seen, samples) << part_count << " parts: each diagonal entry once";
    std::sort(joined.begin(), joined.end(), [](const RelatednessEntry& a, const RelatednessEntry& b) {
      return a.first != b.first ? a.first < b.first : a.second < b.second;
    });
    EXPECT_TRUE(same_bits(joined, whole)) << part_count << " parts differ from the whole";
  }
}

TEST(GrmAccumulator, TileSharesAreNearEqualAndCoverEveryTileOnce) {
  for (std::size_t samples : {1u, 255u, 256u, 257u, 5000u}) {
    for (int part_count : {1, 3, 7, 50}) {
      std::size_t next = 0, smallest = SIZE_MAX, largest = 0;
      for (int part = 1; part <= part_count; ++part) {
        const TileShare share = plan_tile_share(samples, 256, part, part_count);
        EXPECT_EQ(share.first_tile, next);
        next = share.end_tile;
        smallest = std::min(smallest, share.end_tile - share.first_tile);
        largest = std::max(largest, share.end_tile - share.first_tile);
      }
      const std::size_t rows = (samples + 255) / 256;
      EXPECT_EQ(next, rows * (rows + 1) / 2);
      EXPECT_LE(largest - smallest, 1u);
    }
  }
}

TEST(GrmAccumulator, DiagonalSamplesFollowTheDiagonalTiles) {
  // 20 samples in tiles of 5: rows of 4, 3, 2, 1 tiles; share 2 of 3 holds tiles 3..6.
  GrmAccumulator accumulator(20, 2, 3, 5);
  EXPECT_EQ(accumulator.share().first_tile, 3u);
  EXPECT_EQ(accumulator.share().end_tile, 6u);
  EXPECT_EQ(accumulator.diagonal_samples(), std::make_pair(std::size_t{5}, std::size_t{10}));
  GrmAccumulator off_diagonal(20, 1, 10, 5);  // tile 0 only: the first diagonal tile
  EXPECT_EQ(off_diagonal.diagonal_samples(), std::make_pair(std::size_t{0}, std::size_t{5}));
  GrmAccumulator none(20, 2, 10, 5);  // tile 1: (0, 1)
  EXPECT_EQ(none.diagonal_samples().first, none.diagonal_samples().second);
}

TEST(GrmAccumulator, ResultsDoNotDependOnTheThreadCount) {
  const std::size_t samples = 300;
  const std::vector<double> dosages = random_dosages(samples, 200, 0.01, 6);
  std::vector<RelatednessEntry> one, four;
  {
    tbb::global_control limit(tbb::global_control::max_allowed_parallelism, 1);
    one = accumulate(dosages, samples, 1, 1, 64, 128, 0.0);
  }
  {
    tbb::global_control limit(tbb::global_control::max_allowed_parallelism, 4);
    four = accumulate(dosages, samples, 1, 1, 64, 128, 0.0);
  }
  EXPECT_FALSE(one.empty());
  EXPECT_TRUE(same_bits(one, four));
}

TEST(GrmAccumulator, KeepsPairsFromTheThresholdUpAndEveryDiagonal) {
  const std::size_t samples = 30;
  const std::vector<double> dosages = random_dosages(samples, 60, 0.0, 7);
  const std::vector<RelatednessEntry> all = accumulate(dosages, samples, 1, 1, 8, 60, -1e9);
  const std::vector<RelatednessEntry> kept = accumulate(dosages, samples, 1, 1, 8, 60, 0.05);
  std::size_t expected = 0;
  for (const RelatednessEntry& entry : all) expected += entry.first == entry.second || entry.relatedness >= 0.05;
  EXPECT_EQ(kept.size(), expected);
  for (const RelatednessEntry& entry : kept) EXPECT_TRUE(entry.first == entry.second || entry.relatedness >= 0.05);
}

TEST(GrmAccumulator, ASampleWithoutCallsHasNoDiagonalValue) {
  const std::size_t samples = 6;
  std::vector<double> dosages = random_dosages(samples, 10, 0.0, 8);
  for (std::size_t marker_idx = 0; marker_idx < 10; ++marker_idx) dosages[marker_idx * samples + 2] = kMissing;
  GrmAccumulator accumulator(samples, 1, 1, 4);
  accumulator.add_markers(dosages.data(), 10);
  EXPECT_EQ(accumulator.called_markers()[2], 0u);
  for (const RelatednessEntry& entry : accumulator.entries(-1e9)) {
    if (entry.first == 2 && entry.second == 2) {
      EXPECT_TRUE(std::isnan(entry.relatedness));
    } else if (entry.first == 2 || entry.second == 2) {
      ADD_FAILURE() << "a pair without shared markers was kept";
    }
  }
}

// Cut-offs of the kinship phi = A / 2 (Manichaikul et al. 2010,
// Bioinformatics 26:2867-2873): 2^-1.5, 2^-2.5, 2^-3.5, 2^-4.5.
TEST(RelationshipDegree, FollowsThePublishedKinshipCutOffs) {
  EXPECT_EQ(degree_of(1.0), RelationshipDegree::duplicate);
  EXPECT_EQ(degree_of(2 * std::pow(2.0, -1.5)), RelationshipDegree::duplicate);
  EXPECT_EQ(degree_of(0.5), RelationshipDegree::first);
  EXPECT_EQ(degree_of(2 * std::pow(2.0, -2.5)), RelationshipDegree::first);
  EXPECT_EQ(degree_of(0.25), RelationshipDegree::second);
  EXPECT_EQ(degree_of(0.125), RelationshipDegree::third);
  EXPECT_EQ(degree_of(2 * std::pow(2.0, -4.5)), RelationshipDegree::third);
  EXPECT_EQ(degree_of(0.08), RelationshipDegree::unrelated);
  EXPECT_EQ(degree_of(-0.1), RelationshipDegree::unrelated);
  EXPECT_STREQ(degree_label(RelationshipDegree::first), "first_degree");
}

}  // namespace
}  // namespace tamis
