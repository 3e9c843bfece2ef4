// The genomic relationship matrix, accumulated tile by tile from blocks of
// standardised markers (see include/tamis/relatedness.hpp).
//
// For a block of markers, Z holds the standardised dosages (0 where a call is
// missing) and the sums of a tile of sample pairs grow by Z_I Z_J^T: one
// matrix product per tile, so the work runs at the speed of Eigen's product.
// The pair counts M_jk come from the call indicators C = 1 - D (D: missing):
// (C_I C_J^T)_jk = M - d_j - d_k + (D_I D_J^T)_jk, with d_j the markers
// sample j misses. So a tile needs only the co-missing counts D_I D_J^T, and
// nothing at all for a block where its rows miss nothing. Those counts are
// integers, exact whichever way they are taken: a product of 0/1 floats
// where missing calls are many, or one increment per co-missing pair where
// they are few (the usual case once the call-rate floor applies).
#include <tbb/parallel_for.h>

#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>

#include "tamis/relatedness.hpp"

namespace tamis {
namespace {

using CountMatrix = Eigen::Matrix<std::uint32_t, Eigen::Dynamic, Eigen::Dynamic>;

struct Tile {
  std::size_t row_tile = 0;
  std::size_t column_tile = 0;
  Eigen::MatrixXd sums;  // sum over markers of z_j z_k
  CountMatrix co_missing;  // markers that both samples miss; empty until one does
};

// Tiles before row tile `row` in the row-by-row numbering of the upper triangle.
std::size_t tiles_before_row(std::size_t row, std::size_t tile_rows) {
  return row * (2 * tile_rows - row + 1) / 2;
}

// A marker's allele frequency: its mean dosage / 2 over the samples that
// have it (NaN when none has).
double frequency_of(const double* dosages, std::size_t sample_count) {
  std::size_t called = 0;
  double sum = 0.0;
  for (std::size_t sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
    const double value = dosages[sample_idx];
    if (std::isnan(value)) continue;
    ++called;
    sum += value;
  }
  return called ? sum / (2.0 * static_cast<double>(called)) : std::numeric_limits<double>::quiet_NaN();
}

// Whether the co-missing counts of a tile are cheaper as increments, one per
// co-missing pair, than as a product of indicator blocks. A scattered
// increment costs some 16 multiply-adds of a float product.
bool counts_by_increment(std::uint64_t co_missing_pairs, std::size_t rows, std::size_t columns, std::size_t width) {
  return co_missing_pairs * 16 < static_cast<std::uint64_t>(rows) * columns * width;
}

}  // namespace

TileShare plan_tile_share(std::size_t sample_count, std::size_t tile_size, int part, int part_count) {
  TileShare share;
  share.tile_rows = (sample_count + tile_size - 1) / tile_size;
  const std::size_t total = share.tile_rows * (share.tile_rows + 1) / 2;
  share.first_tile = total * static_cast<std::size_t>(part - 1) / static_cast<std::size_t>(part_count);
  share.end_tile = total * static_cast<std::size_t>(part) / static_cast<std::size_t>(part_count);
  return share;
}

struct GrmAccumulator::State {
  std::size_t sample_count = 0;
  std::size_t tile_size = 0;
  TileShare share;
  std::vector<Tile> tiles;
  std::uint64_t markers = 0;
  std::vector<std::uint64_t> missed;  // per sample, markers without a call

  // Scratch of one block, kept between calls.
  Eigen::MatrixXd standardised;        // sample_count x width, 0 where missing
  Eigen::MatrixXf missing_indicator;   // 1 where missing; filled only for blocks that use it
  std::vector<std::vector<std::uint32_t>> missing_samples;  // per kept marker, ascending
  std::vector<double> frequencies;
  std::vector<std::size_t> kept_columns;

  std::size_t rows_in_tile(std::size_t tile_row) const {
    return std::min(tile_size, sample_count - tile_row * tile_size);
  }

  void standardise(const double* dosages, std::size_t width);
  void add_to_tile(Tile& tile, std::size_t width, bool indicator_ready) const;
  void add_co_missing_by_increment(Tile& tile, std::size_t width) const;
  std::uint64_t co_missing_pairs(const Tile& tile, std::size_t width) const;
};

void GrmAccumulator::State::standardise(const double* dosages, std::size_t width) {
  frequencies.resize(width);
  tbb::parallel_for(std::size_t{0}, width, [&](std::size_t marker_idx) {
    frequencies[marker_idx] = frequency_of(dosages + marker_idx * sample_count, sample_count);
  });
  kept_columns.clear();
  for (std::size_t marker_idx = 0; marker_idx < width; ++marker_idx) {
    // A marker without variation (or without calls) has no standardised value.
    if (frequencies[marker_idx] > 0.0 && frequencies[marker_idx] < 1.0) kept_columns.push_back(marker_idx);
  }
  const std::size_t kept = kept_columns.size();
  if (standardised.cols() < static_cast<Eigen::Index>(kept)) {
    standardised.resize(static_cast<Eigen::Index>(sample_count), static_cast<Eigen::Index>(kept));
  }
  if (missing_samples.size() < kept) missing_samples.resize(kept);
  tbb::parallel_for(std::size_t{0}, kept, [&](std::size_t column_idx) {
    const std::size_t marker_idx = kept_columns[column_idx];
    const double* values = dosages + marker_idx * sample_count;
    const double frequency = frequencies[marker_idx];
    const double twice_frequency = 2.0 * frequency;
    const double scale = std::sqrt(2.0 * frequency * (1.0 - frequency));
    double* column = standardised.col(static_cast<Eigen::Index>(column_idx)).data();
    std::vector<std::uint32_t>& missing = missing_samples[column_idx];
    missing.clear();
    for (std::size_t sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
      const double value = values[sample_idx];
      if (std::isnan(value)) {
        column[sample_idx] = 0.0;
        missing.push_back(static_cast<std::uint32_t>(sample_idx));
      } else {
        column[sample_idx] = (value - twice_frequency) / scale;
      }
    }
  });
  for (std::size_t column_idx = 0; column_idx < kept; ++column_idx) {
    for (std::uint32_t sample : missing_samples[column_idx]) ++missed[sample];
  }
  markers += kept;
}

std::uint64_t GrmAccumulator::State::co_missing_pairs(const Tile& tile, std::size_t width) const {
  const std::uint32_t row_first = static_cast<std::uint32_t>(tile.row_tile * tile_size);
  const std::uint32_t row_end = row_first + static_cast<std::uint32_t>(rows_in_tile(tile.row_tile));
  const std::uint32_t column_first = static_cast<std::uint32_t>(tile.column_tile * tile_size);
  const std::uint32_t column_end = column_first + static_cast<std::uint32_t>(rows_in_tile(tile.column_tile));
  std::uint64_t pairs = 0;
  for (std::size_t column_idx = 0; column_idx < width; ++column_idx) {
    const std::vector<std::uint32_t>& missing = missing_samples[column_idx];
    if (missing.empty()) continue;
    const auto in_rows = std::lower_bound(missing.begin(), missing.end(), row_end) -
                         std::lower_bound(missing.begin(), missing.end(), row_first);
    if (in_rows == 0) continue;
    const auto in_columns = std::lower_bound(missing.begin(), missing.end(), column_end) -
                            std::lower_bound(missing.begin(), missing.end(), column_first);
    pairs += static_cast<std::uint64_t>(in_rows) * static_cast<std::uint64_t>(in_columns);
  }
  return pairs;
}

void GrmAccumulator::State::add_co_missing_by_increment(Tile& tile, std::size_t width) const {
  const std::uint32_t row_first = static_cast<std::uint32_t>(tile.row_tile * tile_size);
  const std::uint32_t row_end = row_first + static_cast<std::uint32_t>(rows_in_tile(tile.row_tile));
  const std::uint32_t column_first = static_cast<std::uint32_t>(tile.column_tile * tile_size);
  const std::uint32_t column_end = column_first + static_cast<std::uint32_t>(rows_in_tile(tile.column_tile));
  for (std::size_t column_idx = 0; column_idx < width; ++column_idx) {
    const std::vector<std::uint32_t>& missing = missing_samples[column_idx];
    const auto rows_begin = std::lower_bound(missing.begin(), missing.end(), row_first);
    const auto rows_stop = std::lower_bound(rows_begin, missing.end(), row_end);
    if (rows_begin == rows_stop) continue;
    const auto columns_begin = std::lower_bound(missing.begin(), missing.end(), column_first);
    const auto columns_stop = std::lower_bound(columns_begin, missing.end(), column_end);
    for (auto column_sample = columns_begin; column_sample != columns_stop; ++column_sample) {
      std::uint32_t* counts = tile.co_missing.col(*column_sample - column_first).data();
      for (auto row_sample = rows_begin; row_sample != rows_stop; ++row_sample) ++counts[*row_sample - row_first];
    }
  }
}

void GrmAccumulator::State::add_to_tile(Tile& tile, std::size_t width, bool indicator_ready) const {
  const Eigen::Index row_first = static_cast<Eigen::Index>(tile.row_tile * tile_size);
  const Eigen::Index rows = static_cast<Eigen::Index>(rows_in_tile(tile.row_tile));
  const Eigen::Index column_first = static_cast<Eigen::Index>(tile.column_tile * tile_size);
  const Eigen::Index columns = static_cast<Eigen::Index>(rows_in_tile(tile.column_tile));
  const Eigen::Index depth = static_cast<Eigen::Index>(width);
  tile.sums.noalias() += standardised.block(row_first, 0, rows, depth) *
                         standardised.block(column_first, 0, columns, depth).transpose();
  const std::uint64_t pairs = co_missing_pairs(tile, width);
  if (pairs == 0) return;
  if (tile.co_missing.size() == 0) tile.co_missing = CountMatrix::Zero(rows, columns);
  if (!indicator_ready || counts_by_increment(pairs, static_cast<std::size_t>(rows),
                                               static_cast<std::size_t>(columns), width)) {
    add_co_missing_by_increment(tile, width);
    return;
  }
  // Sums of 0/1 over at most 2^24 markers are exact in float.
  const Eigen::MatrixXf both = missing_indicator.block(row_first, 0, rows, depth) *
                               missing_indicator.block(column_first, 0, columns, depth).transpose();
  tile.co_missing += both.cast<std::uint32_t>();
}

// Eigen blocks its products by the cache sizes it reads from the CPU, and
// for a short block of markers (16 or fewer against a tile of 256) the
// blocking decides which register kernel, with which order of additions,
// takes a row. Fixed sizes make a tile's sums the same on every machine, so
// that the parts of one matrix can run on different cluster nodes. The
// setting is process-wide; only the speed of other products could change.
void fix_product_blocking() {
  Eigen::setCpuCacheSizes(32 * 1024, 512 * 1024, 8 * 1024 * 1024);
}

GrmAccumulator::GrmAccumulator(std::size_t sample_count, int part, int part_count, std::size_t tile_size)
    : state_(std::make_unique<State>()) {
  fix_product_blocking();
  State& state = *state_;
  state.sample_count = sample_count;
  state.tile_size = std::max<std::size_t>(tile_size, 1);
  state.share = plan_tile_share(sample_count, state.tile_size, part, part_count);
  state.missed.assign(sample_count, 0);
  state.tiles.reserve(state.share.end_tile - state.share.first_tile);
  std::size_t row = 0;
  for (std::size_t tile_idx = state.share.first_tile; tile_idx < state.share.end_tile; ++tile_idx) {
    while (tiles_before_row(row + 1, state.share.tile_rows) <= tile_idx) ++row;
    Tile tile;
    tile.row_tile = row;
    tile.column_tile = row + (tile_idx - tiles_before_row(row, state.share.tile_rows));
    tile.sums = Eigen::MatrixXd::Zero(static_cast<Eigen::Index>(state.rows_in_tile(tile.row_tile)),
                                      static_cast<Eigen::Index>(state.rows_in_tile(tile.column_tile)));
    state.tiles.push_back(std::move(tile));
  }
}

GrmAccumulator::~GrmAccumulator() = default;
GrmAccumulator::GrmAccumulator(GrmAccumulator&&) noexcept = default;
GrmAccumulator& GrmAccumulator::operator=(GrmAccumulator&&) noexcept = default;

std::size_t GrmAccumulator::preferred_block_width(std::size_t sample_count) {
  constexpr std::size_t kBlockBytes = std::size_t{128} << 20;
  const std::size_t fitting = kBlockBytes / (sizeof(double) * std::max<std::size_t>(sample_count, 1));
  // At most 256 markers: Eigen's product then never splits a block along
  // the markers (it does beyond about 400 with a 32 KiB L1 cache), so each
  // sum is taken in the same order on every machine.
  return std::clamp<std::size_t>(fitting / 8 * 8, 64, 256);
}

void GrmAccumulator::add_markers(const double* dosages, std::size_t width) {
  State& state = *state_;
  if (width == 0 || state.sample_count == 0) return;
  state.standardise(dosages, width);
  const std::size_t kept = state.kept_columns.size();
  if (kept == 0) return;
  // The indicator matrix is worth filling only when some tile will take the
  // product; deciding that costs one pass over the missing lists.
  std::uint64_t missing_total = 0;
  for (std::size_t column_idx = 0; column_idx < kept; ++column_idx) missing_total += state.missing_samples[column_idx].size();
  const double missing_share = static_cast<double>(missing_total) / (static_cast<double>(kept) * state.sample_count);
  const bool indicator_ready = missing_share * missing_share * 16.0 >= 1.0;
  if (indicator_ready) {
    state.missing_indicator = Eigen::MatrixXf::Zero(static_cast<Eigen::Index>(state.sample_count),
                                                    static_cast<Eigen::Index>(kept));
    for (std::size_t column_idx = 0; column_idx < kept; ++column_idx) {
      for (std::uint32_t sample : state.missing_samples[column_idx]) {
        state.missing_indicator(sample, static_cast<Eigen::Index>(column_idx)) = 1.0f;
      }
    }
  }
  tbb::parallel_for(std::size_t{0}, state.tiles.size(),
                    [&](std::size_t tile_idx) { state.add_to_tile(state.tiles[tile_idx], kept, indicator_ready); });
}

std::size_t GrmAccumulator::sample_count() const { return state_->sample_count; }
std::uint64_t GrmAccumulator::marker_count() const { return state_->markers; }

std::vector<std::uint64_t> GrmAccumulator::called_markers() const {
  std::vector<std::uint64_t> called(state_->sample_count);
  for (std::size_t sample_idx = 0; sample_idx < called.size(); ++sample_idx) {
    called[sample_idx] = state_->markers - state_->missed[sample_idx];
  }
  return called;
}

const TileShare& GrmAccumulator::share() const { return state_->share; }

std::pair<std::size_t, std::size_t> GrmAccumulator::diagonal_samples() const {
  // A share is a run of consecutive tiles, so its diagonal tiles are too.
  const State& state = *state_;
  std::size_t first = 0, end = 0;
  for (const Tile& tile : state.tiles) {
    if (tile.row_tile != tile.column_tile) continue;
    if (end == 0) first = tile.row_tile * state.tile_size;
    end = tile.row_tile * state.tile_size + state.rows_in_tile(tile.row_tile);
  }
  return {first, end};
}

std::vector<RelatednessEntry> GrmAccumulator::entries(double keep_above) const {
  std::vector<RelatednessEntry> kept;
  visit_entries(keep_above, [&kept](const RelatednessEntry& entry) { kept.push_back(entry); });
  return kept;
}

void GrmAccumulator::visit_entries(double keep_above,
                                   const std::function<void(const RelatednessEntry&)>& visit) const {
  const State& state = *state_;
  // Tiles are held row by row, so the tiles of one row tile are adjacent.
  std::size_t row_start = 0;
  while (row_start < state.tiles.size()) {
    const std::size_t row_tile = state.tiles[row_start].row_tile;
    std::size_t row_stop = row_start;
    while (row_stop < state.tiles.size() && state.tiles[row_stop].row_tile == row_tile) ++row_stop;
    const std::size_t first_sample = row_tile * state.tile_size;
    for (std::size_t local_row = 0; local_row < state.rows_in_tile(row_tile); ++local_row) {
      const std::uint32_t sample = static_cast<std::uint32_t>(first_sample + local_row);
      for (std::size_t tile_idx = row_start; tile_idx < row_stop; ++tile_idx) {
        const Tile& tile = state.tiles[tile_idx];
        const bool diagonal_tile = tile.column_tile == row_tile;
        const std::size_t first_column = tile.column_tile * state.tile_size;
        for (std::size_t local_column = diagonal_tile ? local_row : 0;
             local_column < static_cast<std::size_t>(tile.sums.cols()); ++local_column) {
          const std::uint32_t other = static_cast<std::uint32_t>(first_column + local_column);
          const Eigen::Index row_index = static_cast<Eigen::Index>(local_row);
          const Eigen::Index column_index = static_cast<Eigen::Index>(local_column);
          const std::uint64_t co_missing = tile.co_missing.size() ? tile.co_missing(row_index, column_index) : 0;
          // Both have the marker unless one misses it: M - d_j - d_k + (both miss);
          // on the diagonal, M - d_j.
          const std::uint64_t markers = state.markers - state.missed[sample] - state.missed[other] + co_missing;
          const bool self = other == sample;
          const double value = markers ? tile.sums(row_index, column_index) / static_cast<double>(markers)
                                       : std::numeric_limits<double>::quiet_NaN();
          if (self || (markers > 0 && value >= keep_above)) visit({sample, other, value, markers});
        }
      }
    }
    row_start = row_stop;
  }
}

}  // namespace tamis
