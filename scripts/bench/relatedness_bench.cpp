// The relatedness accumulator against Eigen's own matrix product on the
// same shapes, in the same run: every block of markers of the accumulator
// (standardised, counted, multiplied tile by tile) against the product
// Z Z^T of the same block, n x w times w x n, into one n x n matrix.
//
// Usage: relatedness_bench [SAMPLES MARKERS ROUNDS MISSING_RATE THREADS]
// Prints the median times of interleaved rounds and the rates: multiply-adds
// per second (the accumulator does those of its tiles, about half of Eigen's
// full square), and sample pairs x markers per second (each pair once).
#include <tbb/global_control.h>

#include <Eigen/Dense>
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <limits>
#include <random>
#include <vector>

#include "tamis/relatedness.hpp"

namespace {

using Clock = std::chrono::steady_clock;

double seconds_since(Clock::time_point start) {
  return std::chrono::duration<double>(Clock::now() - start).count();
}

double median(std::vector<double> values) {
  std::sort(values.begin(), values.end());
  return values[(values.size() - 1) / 2];
}

std::vector<double> random_dosages(std::size_t samples, std::size_t markers, double missing_rate) {
  std::mt19937_64 random(20261203);
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  std::vector<double> dosages(samples * markers);
  for (std::size_t marker_idx = 0; marker_idx < markers; ++marker_idx) {
    const double frequency = 0.02 + 0.48 * uniform(random);
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      const double value = (uniform(random) < frequency) + (uniform(random) < frequency);
      dosages[marker_idx * samples + sample_idx] =
          uniform(random) < missing_rate ? std::numeric_limits<double>::quiet_NaN() : value;
    }
  }
  return dosages;
}

// Sample pairs in the upper-triangle tiles, diagonal tiles in full: what
// the accumulator multiplies per marker.
std::size_t tile_pairs(std::size_t samples) {
  const std::size_t tile = tamis::GrmAccumulator::kDefaultTileSize;
  const tamis::TileShare share = tamis::plan_tile_share(samples, tile, 1, 1);
  std::size_t pairs = 0;
  for (std::size_t row = 0; row < share.tile_rows; ++row) {
    for (std::size_t column = row; column < share.tile_rows; ++column) {
      pairs += std::min(tile, samples - row * tile) * std::min(tile, samples - column * tile);
    }
  }
  return pairs;
}

}  // namespace

int main(int argc, char** argv) {
  const std::size_t samples = argc > 1 ? std::strtoul(argv[1], nullptr, 10) : 4096;
  const std::size_t markers = argc > 2 ? std::strtoul(argv[2], nullptr, 10) : 2048;
  const int rounds = argc > 3 ? std::atoi(argv[3]) : 5;
  const double missing_rate = argc > 4 ? std::atof(argv[4]) : 0.01;
  const int threads = argc > 5 ? std::atoi(argv[5]) : 1;
  tbb::global_control limit(tbb::global_control::max_allowed_parallelism, static_cast<std::size_t>(threads));
  // Eigen's product runs with the cache sizes it reads from this CPU; the
  // accumulator fixes its own (for the same bits on every machine).
  const std::ptrdiff_t native_l1 = Eigen::l1CacheSize(), native_l2 = Eigen::l2CacheSize(),
                       native_l3 = Eigen::l3CacheSize();
  const std::size_t width = tamis::GrmAccumulator::preferred_block_width(samples);
  const std::vector<double> dosages = random_dosages(samples, markers, missing_rate);

  // Eigen's operand: the same blocks, standardised beforehand (its time is
  // the product alone), missing values as 0.
  std::vector<Eigen::MatrixXd> blocks;
  for (std::size_t start = 0; start < markers; start += width) {
    const std::size_t block_width = std::min(width, markers - start);
    Eigen::MatrixXd block(static_cast<Eigen::Index>(samples), static_cast<Eigen::Index>(block_width));
    for (std::size_t column = 0; column < block_width; ++column) {
      for (std::size_t sample = 0; sample < samples; ++sample) {
        const double value = dosages[(start + column) * samples + sample];
        block(static_cast<Eigen::Index>(sample), static_cast<Eigen::Index>(column)) = std::isnan(value) ? 0.0 : value - 1.0;
      }
    }
    blocks.push_back(std::move(block));
  }

  std::vector<double> ours, eigens;
  double tile_multiply_adds = 0.0;
  for (int round = 0; round < rounds; ++round) {
    {
      tamis::GrmAccumulator accumulator(samples, 1, 1);
      const Clock::time_point start = Clock::now();
      for (std::size_t first = 0; first < markers; first += width) {
        accumulator.add_markers(dosages.data() + first * samples, std::min(width, markers - first));
      }
      ours.push_back(seconds_since(start));
      tile_multiply_adds = static_cast<double>(tile_pairs(samples)) * static_cast<double>(accumulator.marker_count());
    }
    {
      Eigen::setCpuCacheSizes(native_l1, native_l2, native_l3);
      Eigen::MatrixXd full = Eigen::MatrixXd::Zero(static_cast<Eigen::Index>(samples), static_cast<Eigen::Index>(samples));
      const Clock::time_point start = Clock::now();
      for (const Eigen::MatrixXd& block : blocks) full.noalias() += block * block.transpose();
      eigens.push_back(seconds_since(start));
      if (full(0, 0) == -1.0) std::printf("unreachable\n");  // keeps the product
    }
  }
  const double our_time = median(ours), eigen_time = median(eigens);
  const double pair_markers = static_cast<double>(samples) * (samples + 1) / 2 * static_cast<double>(markers);
  const double eigen_multiply_adds = static_cast<double>(samples) * samples * static_cast<double>(markers);
  std::printf("samples %zu, markers %zu (blocks of %zu), missing %.3g, threads %d, %d rounds (medians)\n", samples,
              markers, width, missing_rate, threads, rounds);
  std::printf("Eigen's cache sizes on this CPU: L1 %td, L2 %td, L3 %td bytes\n", native_l1, native_l2, native_l3);
  std::printf("accumulator: %.3f s, %.3g multiply-adds/s, %.3g pairs x markers/s\n", our_time,
              tile_multiply_adds / our_time, pair_markers / our_time);
  std::printf("eigen Z Z^T: %.3f s, %.3g multiply-adds/s, %.3g pairs x markers/s (each pair once)\n", eigen_time,
              eigen_multiply_adds / eigen_time, pair_markers / eigen_time);
  std::printf("rate ratio, multiply-adds: %.2f; pairs x markers: %.2f\n",
              (tile_multiply_adds / our_time) / (eigen_multiply_adds / eigen_time), eigen_time / our_time);
  return 0;
}
