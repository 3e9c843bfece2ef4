#include "scan/trait_pass.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <iterator>

#include "common/vector_clones.hpp"
#include "tamis/distributions.hpp"
#include "tamis/hardy_weinberg.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

// Eight lanes of doubles, as GCC and clang vector types: the compiler maps
// them onto whatever vector unit the machine has, while every lane keeps its
// own partial sums in the same order, so the totals have the same bits on
// every machine.
constexpr std::size_t kLaneCount = 8;
typedef double Lanes __attribute__((vector_size(kLaneCount * sizeof(double))));
typedef std::int64_t LaneMask __attribute__((vector_size(kLaneCount * sizeof(std::int64_t))));

TAMIS_ALWAYS_INLINE Lanes load_lanes(const double* values) {
  Lanes lanes;
  std::memcpy(&lanes, values, sizeof lanes);
  return lanes;
}
// Eight unsigned bytes as eight doubles: each lane shifts its own byte
// down, and the 2^52 exponent trick turns the small integer into a double,
// all in whole-vector steps (a plain conversion came out as one scalar
// insert per byte).
TAMIS_ALWAYS_INLINE Lanes bytes_to_lanes(const std::uint8_t* bytes) {
  typedef std::uint64_t LaneWords __attribute__((vector_size(kLaneCount * sizeof(std::uint64_t))));
  std::uint64_t packed;
  std::memcpy(&packed, bytes, sizeof packed);
  const LaneWords shifts = {0, 8, 16, 24, 32, 40, 48, 56};
  const LaneWords lane_bytes = ((LaneWords{} + packed) >> shifts) & 0xFF;
  constexpr double kTwoTo52 = 4503599627370496.0;
  return (Lanes)(lane_bytes | 0x4330000000000000ull) - kTwoTo52;
}
TAMIS_ALWAYS_INLINE Lanes where(LaneMask mask, Lanes values) { return (Lanes)((LaneMask)values & mask); }
TAMIS_ALWAYS_INLINE double lane_total(Lanes lanes) {
  return ((lanes[0] + lanes[1]) + (lanes[2] + lanes[3])) + ((lanes[4] + lanes[5]) + (lanes[6] + lanes[7]));
}

// One sample's terms of the site totals, for the samples left over after the
// eight-lane groups.
void add_sample_terms(const DosageBlock& block, std::size_t site_idx, std::size_t sample, bool scaled_haploid,
                      SiteTotals& totals) {
  const double value = block.site_dosages(site_idx)[sample];
  const bool called = !std::isnan(value);
  const double taken = called ? value : 0.0;
  totals.called += called ? 1.0 : 0.0;
  totals.sum += taken;
  totals.squares += taken * taken;
  if (!block.sites[site_idx].has_hard_calls) return;
  const int ploidy = block.site_ploidy(site_idx)[sample];
  const int copies = ploidy > 0 ? ploidy : 2;
  const int call = block.site_diploid_calls(site_idx)[sample];
  totals.slots += called ? static_cast<double>(copies) : 0.0;
  totals.copies += (copies == 1 && scaled_haploid) ? taken * 0.5 : taken;
  totals.hom_ref += call == 0 ? 1.0 : 0.0;
  totals.het += call == 1 ? 1.0 : 0.0;
  totals.hom_alt += call == 2 ? 1.0 : 0.0;
}

// The dosage sums of one site over every genotype sample.
TAMIS_VECTOR_CLONES
void total_dosages(const double* dosages, std::size_t samples, SiteTotals& totals) {
  Lanes called = {}, sum = {}, squares = {};
  const Lanes ones = Lanes{} + 1.0;
  const std::size_t grouped = samples / kLaneCount * kLaneCount;
  for (std::size_t sample = 0; sample < grouped; sample += kLaneCount) {
    const Lanes values = load_lanes(dosages + sample);
    const LaneMask is_called = values == values;  // false for NaN, a missing dosage
    const Lanes taken = where(is_called, values);
    called += where(is_called, ones);
    sum += taken;
    squares += taken * taken;
  }
  totals.called = lane_total(called);
  totals.sum = lane_total(sum);
  totals.squares = lane_total(squares);
}

// How many of the diploid calls are 0, 1 and 2. Byte lanes count up to 255
// chunks at a time (a comparison is -1 where true), then go into the totals:
// a byte per sample read, and no widening in the loop.
TAMIS_ALWAYS_INLINE void count_calls(const std::int8_t* calls, std::size_t samples, std::uint64_t counts[3]) {
  typedef std::int8_t CallBytes __attribute__((vector_size(32)));
  constexpr std::size_t kChunk = sizeof(CallBytes), kChunksPerCount = 255;
  std::size_t sample = 0;
  while (sample + kChunk <= samples) {
    CallBytes tallies[3] = {};
    for (std::size_t chunk = 0; chunk < kChunksPerCount && sample + kChunk <= samples; ++chunk, sample += kChunk) {
      CallBytes chunk_calls;
      std::memcpy(&chunk_calls, calls + sample, sizeof chunk_calls);
      for (int value = 0; value < 3; ++value) {
        tallies[value] -= (CallBytes)(chunk_calls == static_cast<std::int8_t>(value));
      }
    }
    for (int value = 0; value < 3; ++value) {
      for (std::size_t lane = 0; lane < kChunk; ++lane) counts[value] += static_cast<std::uint8_t>(tallies[value][lane]);
    }
  }
  for (; sample < samples; ++sample) {
    counts[0] += calls[sample] == 0;
    counts[1] += calls[sample] == 1;
    counts[2] += calls[sample] == 2;
  }
}

// The same with the hard calls: alleles counted over each sample's ploidy (a
// haploid GT dosage scaled to 0/2 still counts as one allele), and the
// diploid calls tallied for the Hardy-Weinberg test.
TAMIS_VECTOR_CLONES
void total_hard_calls(const double* dosages, const std::uint8_t* ploidy, const std::int8_t* calls,
                      std::size_t samples, bool scaled_haploid, SiteTotals& totals) {
  Lanes called = {}, sum = {}, squares = {}, slots = {}, copies_sum = {};
  const Lanes ones = Lanes{} + 1.0, twos = Lanes{} + 2.0, halves = Lanes{} + 0.5;
  const std::size_t grouped = samples / kLaneCount * kLaneCount;
  for (std::size_t sample = 0; sample < grouped; sample += kLaneCount) {
    const Lanes values = load_lanes(dosages + sample);
    const Lanes sample_ploidy = bytes_to_lanes(ploidy + sample);
    const LaneMask is_called = values == values;
    const Lanes taken = where(is_called, values);
    const LaneMask has_ploidy = sample_ploidy > 0.0;
    const Lanes copies = where(has_ploidy, sample_ploidy) + where(~has_ploidy, twos);
    called += where(is_called, ones);
    sum += taken;
    squares += taken * taken;
    slots += where(is_called, copies);
    if (scaled_haploid) {
      const LaneMask haploid = copies == 1.0;
      copies_sum += taken * (where(haploid, halves) + where(~haploid, ones));
    }
  }
  // The diploid calls are integers: counted apart, in any order.
  std::uint64_t call_counts[3] = {0, 0, 0};
  count_calls(calls, grouped, call_counts);
  totals.called = lane_total(called);
  totals.sum = lane_total(sum);
  totals.squares = lane_total(squares);
  totals.slots = lane_total(slots);
  // Unscaled, every dosage counts its own value of alleles: the same sums.
  totals.copies = scaled_haploid ? lane_total(copies_sum) : totals.sum;
  totals.hom_ref = call_counts[0];
  totals.het = call_counts[1];
  totals.hom_alt = call_counts[2];
}

SiteSummary summary_from_totals(const SiteTotals& totals, bool has_hard_calls) {
  SiteSummary summary;
  summary.called = static_cast<std::size_t>(totals.called);
  summary.sum = totals.sum;
  summary.sum_squares = totals.squares;
  if (!has_hard_calls) {
    summary.allele_count = summary.sum;
    summary.allele_slots = 2.0 * static_cast<double>(summary.called);
    return summary;
  }
  summary.allele_slots = totals.slots;
  summary.allele_count = totals.copies;
  summary.hom_ref = static_cast<std::uint64_t>(totals.hom_ref);
  summary.het = static_cast<std::uint64_t>(totals.het);
  summary.hom_alt = static_cast<std::uint64_t>(totals.hom_alt);
  if (summary.hom_ref + summary.het + summary.hom_alt > 0 && summary.varies()) {
    summary.hwe_log_p = hardy_weinberg_exact_log_p(summary.hom_ref, summary.het, summary.hom_alt);
  }
  return summary;
}

// One site's totals over a list of samples, in one pass without branches:
// the few samples a trait leaves out, or the samples of a small set.
SiteTotals totals_over(const DosageBlock& block, std::size_t site_idx, const std::vector<std::size_t>& samples,
                       bool scaled_haploid) {
  const double* dosages = block.site_dosages(site_idx);
  SiteTotals totals;
  for (std::size_t sample : samples) {
    const double value = dosages[sample];
    const bool called = value == value;
    const double taken = called ? value : 0.0;
    totals.called += called ? 1.0 : 0.0;
    totals.sum += taken;
    totals.squares += taken * taken;
  }
  if (!block.sites[site_idx].has_hard_calls) return totals;
  const std::uint8_t* ploidy = block.site_ploidy(site_idx);
  const std::int8_t* calls = block.site_diploid_calls(site_idx);
  double copies = 0.0;
  for (std::size_t sample : samples) {
    const double value = dosages[sample];
    const bool called = value == value;
    const int sample_ploidy = ploidy[sample];
    const double slots = sample_ploidy > 0 ? sample_ploidy : 2;
    totals.slots += called ? slots : 0.0;
    copies += called ? (slots == 1.0 && scaled_haploid ? value * 0.5 : value) : 0.0;
    totals.hom_ref += calls[sample] == 0 ? 1.0 : 0.0;
    totals.het += calls[sample] == 1 ? 1.0 : 0.0;
    totals.hom_alt += calls[sample] == 2 ? 1.0 : 0.0;
  }
  totals.copies = copies;
  return totals;
}

void subtract_totals(const SiteTotals& part, SiteTotals& totals) {
  totals.called -= part.called;
  totals.sum -= part.sum;
  totals.squares -= part.squares;
  totals.slots -= part.slots;
  totals.copies -= part.copies;
  totals.hom_ref -= part.hom_ref;
  totals.het -= part.het;
  totals.hom_alt -= part.hom_alt;
}

// The site's totals over one sample set: the block's totals less the
// samples outside the set when those are few (a scan usually drops a handful
// of samples with a missing trait), else summed over the set directly.
SiteTotals totals_for_samples(const TraitContext& trait, const DosageBlock& block, const BlockTotals& block_totals,
                              std::size_t site_idx) {
  const bool scaled_haploid = block.sites[site_idx].source == DosageField::gt && trait.haploid_dosage == 2;
  if (!subtracts_left_out(trait)) return totals_over(block, site_idx, trait.set.genotype_index, scaled_haploid);
  SiteTotals totals = block_totals.sites[site_idx];
  const std::vector<std::size_t>& beyond = trait.excluded_beyond_shared;
  if (!beyond.empty()) subtract_totals(totals_over(block, site_idx, beyond, scaled_haploid), totals);
  return totals;
}

void total_every_sample(const DosageBlock& block, int haploid_dosage, BlockTotals& totals) {
  totals.sites.assign(block.size(), SiteTotals{});
  const std::size_t samples = block.sample_count;
  const std::size_t grouped = samples / kLaneCount * kLaneCount;
  for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
    const VariantSite& site = block.sites[site_idx];
    const bool scaled_haploid = site.source == DosageField::gt && haploid_dosage == 2;
    SiteTotals& site_totals = totals.sites[site_idx];
    if (site.has_hard_calls) {
      total_hard_calls(block.site_dosages(site_idx), block.site_ploidy(site_idx), block.site_diploid_calls(site_idx),
                       samples, scaled_haploid, site_totals);
    } else {
      total_dosages(block.site_dosages(site_idx), samples, site_totals);
    }
    for (std::size_t sample = grouped; sample < samples; ++sample) {
      add_sample_terms(block, site_idx, sample, scaled_haploid, site_totals);
    }
  }
}

}  // namespace

bool subtracts_left_out(const TraitContext& trait) {
  return trait.excluded_genotype_index.size() <= trait.set.genotype_index.size();
}

std::vector<std::size_t> samples_left_out_by_all(const std::vector<TraitContext>& traits) {
  std::vector<std::size_t> shared;
  bool first = true;
  for (const TraitContext& trait : traits) {
    if (!subtracts_left_out(trait)) continue;
    const std::vector<std::size_t>& excluded = trait.excluded_genotype_index;  // sorted
    if (first) {
      shared = excluded;
      first = false;
      continue;
    }
    std::vector<std::size_t> both;
    std::set_intersection(shared.begin(), shared.end(), excluded.begin(), excluded.end(), std::back_inserter(both));
    shared.swap(both);
  }
  return shared;
}

void note_left_out_beyond_shared(const std::vector<std::size_t>& left_out_by_all, std::vector<TraitContext>& traits) {
  for (TraitContext& trait : traits) {
    trait.excluded_beyond_shared.clear();
    const std::vector<std::size_t>& excluded = trait.excluded_genotype_index;
    std::set_difference(excluded.begin(), excluded.end(), left_out_by_all.begin(), left_out_by_all.end(),
                        std::back_inserter(trait.excluded_beyond_shared));
  }
}

void total_block(const DosageBlock& block, int haploid_dosage, const std::vector<std::size_t>& left_out_by_all,
                 BlockTotals& totals) {
  total_every_sample(block, haploid_dosage, totals);
  if (left_out_by_all.empty()) return;
  for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
    const bool scaled_haploid = block.sites[site_idx].source == DosageField::gt && haploid_dosage == 2;
    subtract_totals(totals_over(block, site_idx, left_out_by_all, scaled_haploid), totals.sites[site_idx]);
  }
}

namespace {

// Sites per tile of the sample-major copy: one tile writes each sample's
// values for this many sites at once, a whole cache line of doubles, instead
// of one value per line per site.
constexpr std::size_t kTransposeTile = 8;
static_assert(kTransposeTile == 8, "copy_eight_sites_sample_major copies eight sites at a time");

typedef double Eight __attribute__((vector_size(8 * sizeof(double))));
typedef std::int64_t EightMask __attribute__((vector_size(8 * sizeof(std::int64_t))));

// A missing dosage (NaN) becomes 0; the mask says which lanes were called.
TAMIS_ALWAYS_INLINE Eight zero_where_missing(Eight values, EightMask& called) {
  called = values == values;
  return (Eight)((EightMask)values & called);
}

// In three whole-vector steps rather than eight lane extractions.
TAMIS_ALWAYS_INLINE bool all_lanes(EightMask mask) {
  mask &= __builtin_shufflevector(mask, mask, 4, 5, 6, 7, 0, 1, 2, 3);
  mask &= __builtin_shufflevector(mask, mask, 2, 3, 0, 1, 6, 7, 4, 5);
  mask &= __builtin_shufflevector(mask, mask, 1, 0, 3, 2, 5, 4, 7, 6);
  return mask[0] == -1;
}

// Whether any of the 64 values is missing: a NaN carries through the sums
// (dosages are small, so nothing else becomes one), and one test then
// covers the whole tile.
TAMIS_ALWAYS_INLINE bool any_missing(const Eight (&rows)[8]) {
  Eight total = rows[0];
  for (int k = 1; k < 8; ++k) total += rows[k];
  total += __builtin_shufflevector(total, total, 4, 5, 6, 7, 0, 1, 2, 3);
  total += __builtin_shufflevector(total, total, 2, 3, 0, 1, 6, 7, 4, 5);
  total += __builtin_shufflevector(total, total, 1, 0, 3, 2, 5, 4, 7, 6);
  return total[0] != total[0];
}

// A (site, row) pair of a missing dosage, as the copy finds them.
using MissingDosage = std::pair<std::uint32_t, std::uint32_t>;

// Always inlined, as every function here that takes a vector type: a vector
// passed by value to a function compiled for another target (the caller is
// a target_clones clone) arrives in different registers. At -O1, where this
// one was a call, it read a garbage mask.
TAMIS_ALWAYS_INLINE void note_missing(EightMask called, std::size_t first_site, std::size_t row,
                                      std::vector<MissingDosage>& missing) {
  if (all_lanes(called)) return;
  for (int lane = 0; lane < 8; ++lane) {
    if (called[lane] == 0) missing.push_back({static_cast<std::uint32_t>(first_site + lane), static_cast<std::uint32_t>(row)});
  }
}

// rows[k] holds site k's values for eight consecutive samples; afterwards
// rows[s] holds sample s's values for the eight sites. Pure data movement,
// in three rounds of pairwise shuffles.
TAMIS_ALWAYS_INLINE void transpose_eight(Eight (&rows)[8]) {
  Eight pairs[8], quads[8];
  for (int k = 0; k < 8; k += 2) {
    pairs[k] = __builtin_shufflevector(rows[k], rows[k + 1], 0, 8, 2, 10, 4, 12, 6, 14);
    pairs[k + 1] = __builtin_shufflevector(rows[k], rows[k + 1], 1, 9, 3, 11, 5, 13, 7, 15);
  }
  for (int k = 0; k < 8; k += 4) {
    quads[k] = __builtin_shufflevector(pairs[k], pairs[k + 2], 0, 1, 8, 9, 4, 5, 12, 13);      // samples 0, 4
    quads[k + 1] = __builtin_shufflevector(pairs[k], pairs[k + 2], 2, 3, 10, 11, 6, 7, 14, 15);  // 2, 6
    quads[k + 2] = __builtin_shufflevector(pairs[k + 1], pairs[k + 3], 0, 1, 8, 9, 4, 5, 12, 13);  // 1, 5
    quads[k + 3] = __builtin_shufflevector(pairs[k + 1], pairs[k + 3], 2, 3, 10, 11, 6, 7, 14, 15);  // 3, 7
  }
  rows[0] = __builtin_shufflevector(quads[0], quads[4], 0, 1, 2, 3, 8, 9, 10, 11);
  rows[4] = __builtin_shufflevector(quads[0], quads[4], 4, 5, 6, 7, 12, 13, 14, 15);
  rows[2] = __builtin_shufflevector(quads[1], quads[5], 0, 1, 2, 3, 8, 9, 10, 11);
  rows[6] = __builtin_shufflevector(quads[1], quads[5], 4, 5, 6, 7, 12, 13, 14, 15);
  rows[1] = __builtin_shufflevector(quads[2], quads[6], 0, 1, 2, 3, 8, 9, 10, 11);
  rows[5] = __builtin_shufflevector(quads[2], quads[6], 4, 5, 6, 7, 12, 13, 14, 15);
  rows[3] = __builtin_shufflevector(quads[3], quads[7], 0, 1, 2, 3, 8, 9, 10, 11);
  rows[7] = __builtin_shufflevector(quads[3], quads[7], 4, 5, 6, 7, 12, 13, 14, 15);
}

// Copies eight sites' dosages of the samples `row_samples` into the
// sample-major block (row stride `width`), a missing value as 0, noting
// where those were. Rows mostly take consecutive genotype samples (all of
// them, or all but the few without the trait): eight such samples are
// loaded as one vector per site and transposed; elsewhere each sample's
// eight values are gathered one by one.
TAMIS_VECTOR_CLONES
void copy_eight_sites_sample_major(const std::size_t* __restrict row_samples, std::size_t rows,
                                   const double* const* sources, std::size_t first_site, std::size_t width,
                                   double* __restrict out, std::vector<MissingDosage>& missing) {
  std::size_t row = 0;
  EightMask called;
  while (row < rows) {
    const std::size_t sample = row_samples[row];
    bool run_of_eight = row + 8 <= rows;
    for (std::size_t k = 1; run_of_eight && k < 8; ++k) run_of_eight = row_samples[row + k] == sample + k;
    if (run_of_eight) {
      Eight values[8];
      for (int k = 0; k < 8; ++k) std::memcpy(&values[k], sources[k] + sample, sizeof values[k]);
      const bool complete = !any_missing(values);
      transpose_eight(values);
      if (complete) {
        for (int k = 0; k < 8; ++k) std::memcpy(out + (row + k) * width, &values[k], sizeof values[k]);
      } else {
        for (int k = 0; k < 8; ++k) {
          const Eight zeroed = zero_where_missing(values[k], called);
          note_missing(called, first_site, row + k, missing);
          std::memcpy(out + (row + k) * width, &zeroed, sizeof zeroed);
        }
      }
      row += 8;
      continue;
    }
    const Eight values = {sources[0][sample], sources[1][sample], sources[2][sample], sources[3][sample],
                          sources[4][sample], sources[5][sample], sources[6][sample], sources[7][sample]};
    const Eight zeroed = zero_where_missing(values, called);
    note_missing(called, first_site, row, missing);
    std::memcpy(out + row * width, &zeroed, sizeof zeroed);
    ++row;
  }
}

// The same for one site.
void copy_site_sample_major(const std::vector<std::size_t>& row_samples, const double* source, std::size_t site,
                            std::size_t width, double* out, std::vector<MissingDosage>& missing) {
  for (std::size_t row = 0; row < row_samples.size(); ++row) {
    const double value = source[row_samples[row]];
    const bool called = !std::isnan(value);
    if (!called) missing.push_back({static_cast<std::uint32_t>(site), static_cast<std::uint32_t>(row)});
    out[row * width] = called ? value : 0.0;
  }
}

// The missing dosages grouped by site, each site's rows in ascending order
// (the copy finds them in row order within a tile of sites).
void group_missing_by_site(const std::vector<MissingDosage>& missing, std::size_t width, GatheredBlock& gathered) {
  gathered.missing_starts.assign(width + 1, 0);
  for (const MissingDosage& dosage : missing) ++gathered.missing_starts[dosage.first + 1];
  for (std::size_t site = 0; site < width; ++site) gathered.missing_starts[site + 1] += gathered.missing_starts[site];
  gathered.missing_rows.resize(missing.size());
  std::vector<std::size_t> next(gathered.missing_starts.begin(), gathered.missing_starts.end() - 1);
  for (const MissingDosage& dosage : missing) gathered.missing_rows[next[dosage.first]++] = dosage.second;
}

}  // namespace

std::vector<std::size_t> choose_kernel_rows(const AnalysisSet& set, std::size_t genotype_sample_count,
                                            std::size_t excluded_count) {
  // Rows outside the analysis set cost the kernel as much as the others: all
  // genotype samples serve as rows while at most a quarter of them are idle.
  if (excluded_count * 4 > genotype_sample_count) return set.genotype_index;
  std::vector<std::size_t> rows(genotype_sample_count);
  for (std::size_t row = 0; row < rows.size(); ++row) rows[row] = row;
  return rows;
}

std::unique_ptr<ScoreKernel> make_kernel(const TraitContext& trait) {
  const std::vector<std::size_t>& samples = trait.set.genotype_index;
  if (trait.kernel_row_samples == samples) return std::make_unique<ScoreKernel>(trait.model);
  // Every genotype sample is a row: the analysis sample's row is its genotype index.
  return std::make_unique<ScoreKernel>(trait.model, samples, trait.kernel_row_samples.size());
}

std::vector<std::size_t> kernel_row_of_sample(const TraitContext& trait) {
  const std::vector<std::size_t>& samples = trait.set.genotype_index;
  if (trait.kernel_row_samples != samples) return samples;
  std::vector<std::size_t> rows(samples.size());
  for (std::size_t row = 0; row < rows.size(); ++row) rows[row] = row;
  return rows;
}

void gather_block(const std::vector<std::size_t>& row_samples, const DosageBlock& block, GatheredBlock& gathered) {
  const std::size_t width = block.size();
  gathered.genotypes.resize(row_samples.size() * width);
  std::vector<MissingDosage>& missing = gathered.missing_found;
  missing.clear();
  std::size_t first = 0;
  for (; first + kTransposeTile <= width; first += kTransposeTile) {
    const double* sources[kTransposeTile];
    for (std::size_t k = 0; k < kTransposeTile; ++k) sources[k] = block.site_dosages(first + k);
    copy_eight_sites_sample_major(row_samples.data(), row_samples.size(), sources, first, width,
                                  gathered.genotypes.data() + first, missing);
  }
  for (; first < width; ++first) {
    copy_site_sample_major(row_samples, block.site_dosages(first), first, width, gathered.genotypes.data() + first,
                           missing);
  }
  group_missing_by_site(missing, width, gathered);
}

namespace {

// One site's dosages over the analysis samples, a missing one imputed.
void copy_column(const TraitContext& trait, const DosageBlock& block, std::size_t site_idx, double fill,
                 Eigen::VectorXd& column) {
  const std::vector<std::size_t>& samples = trait.set.genotype_index;
  const double* dosages = block.site_dosages(site_idx);
  column.resize(static_cast<Eigen::Index>(samples.size()));
  for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) {
    const double value = dosages[samples[sample_idx]];
    column[static_cast<Eigen::Index>(sample_idx)] = std::isnan(value) ? fill : value;
  }
}

std::string make_variant_id(const VariantSite& site, const std::string& chromosome) {
  return chromosome + "_" + std::to_string(site.position) + "_" + site.ref + "_" + site.alt;
}

bool looks_like_rsid(const std::string& id) {
  if (id.size() < 3 || id[0] != 'r' || id[1] != 's') return false;
  return std::all_of(id.begin() + 2, id.end(), [](char c) { return c >= '0' && c <= '9'; });
}

double variance_of(const SiteSummary& summary) {
  const double mean = summary.mean();
  return std::max(0.0, summary.sum_squares / static_cast<double>(summary.called) - mean * mean);
}

void fill_site_columns(const TraitContext& trait, const VariantSite& site,
                       const std::string& chromosome, const SiteSummary& summary,
                       ResultRow& row) {
  const double allele_frequency = summary.allele_slots > 0 ? summary.allele_count / summary.allele_slots : 0.0;
  row.chromosome = chromosome;
  row.position = site.position;
  row.effect_allele = site.alt;
  row.other_allele = site.ref;
  row.effect_allele_frequency = allele_frequency;
  row.variant_id = make_variant_id(site, chromosome);
  row.rsid = looks_like_rsid(site.id) ? site.id : std::string();
  row.n = trait.set.genotype_index.size();
  row.info.reset();
  if (site.source == DosageField::ds || site.source == DosageField::gp) {
    row.info = variance_of(summary) / (2.0 * allele_frequency * (1.0 - allele_frequency));
  }
  row.mac = std::min(summary.allele_count, summary.allele_slots - summary.allele_count);
  row.call_rate = static_cast<double>(summary.called) / static_cast<double>(row.n);
  row.hwe_log_p = summary.hwe_log_p;
  row.n_cases.reset();
  if (trait.set.kind == TraitKind::binary) row.n_cases = trait.set.case_count;
}

// The first QC floor the variant fails, or qc_reason_count when it passes all.
int failed_floor(const QcFloors& floors, const ResultRow& row) {
  const double minor_frequency = std::min(row.effect_allele_frequency, 1.0 - row.effect_allele_frequency);
  if (minor_frequency < floors.minor_allele_frequency) return qc_maf;
  if (row.mac < floors.minor_allele_count) return qc_mac;
  if (row.info && *row.info < floors.info) return qc_info;
  if (row.call_rate < floors.call_rate) return qc_call_rate;
  if (row.hwe_log_p && floors.hwe_p > 0.0 && *row.hwe_log_p < std::log(floors.hwe_p)) return qc_hwe;
  return qc_reason_count;
}

bool should_confirm(const TraitContext& trait, double score_log_p) {
  if (trait.confirm_below <= 0.0) return false;
  if (trait.confirm_below >= 1.0) return true;
  return score_log_p < std::log(trait.confirm_below);
}

double spread_of(double score_log_p, double wald_log_p, double lrt_log_p) {
  const double values[] = {neg_log10_from_log(score_log_p), neg_log10_from_log(wald_log_p),
                           neg_log10_from_log(lrt_log_p)};
  const auto [low, high] = std::minmax_element(std::begin(values), std::end(values));
  return *high - *low;
}

void fill_score_columns(const TraitContext& trait, const ScoreResult& score, ResultRow& row) {
  row.test = trait.saddlepoint ? "score_spa" : trait.tests->score_test_name();
  row.beta = score.beta;
  row.standard_error = score.se;
  row.log_p = score.log_p;
  row.score_chisq = score.chisq;
  row.score_log_p = score.log_p;
  row.wald_chisq.reset();
  row.wald_log_p.reset();
  row.lrt_chisq.reset();
  row.lrt_log_p.reset();
  row.log10p_spread.reset();
}

void fill_confirmed_columns(const ConfirmResult& confirmed, const char* test, ResultRow& row) {
  row.test = test;
  row.beta = confirmed.beta;
  row.standard_error = confirmed.se;
  row.log_p = confirmed.lrt_log_p;
  row.wald_chisq = confirmed.wald_chisq;
  row.wald_log_p = confirmed.wald_log_p;
  row.lrt_chisq = confirmed.lrt_chisq;
  row.lrt_log_p = confirmed.lrt_log_p;
  row.log10p_spread = spread_of(row.score_log_p, confirmed.wald_log_p, confirmed.lrt_log_p);
}

// The model's refit of a hit, with Firth's penalised likelihood counted
// where it replaced the standard refit.
void confirm_row(const TraitContext& trait, const Eigen::VectorXd& column, ResultRow& row, TraitTally& tally) {
  const Confirmation confirmation = trait.tests->confirm(column, row.mac);
  if (confirmation.by_firth) ++tally.firth;
  if (!confirmation.result.converged) ++tally.confirm_not_converged;
  ++tally.confirmed;
  if (confirmation.keeps_score) {
    // No usable refit: the row stays a score row, its test value saying why.
    row.test = trait.saddlepoint ? "score_spa_no_refit" : "score_no_refit";
    return;
  }
  fill_confirmed_columns(confirmation.result,
                         confirmation.test ? confirmation.test : confirmation.by_firth ? "firth_lrt" : "lrt", row);
  if (confirmation.wald_is_primary) row.log_p = confirmation.result.wald_log_p;
  if (!confirmation.extra_fields.empty()) row.extra_fields = confirmation.extra_fields;
}

// The saddlepoint tail replaces the normal one beyond its cut-off; below it
// the two agree, so the plain p-value stands and null variants stay cheap.
void calibrate_score(const TraitContext& trait, const DosageBlock& block, TraitScratch& scratch,
                     std::size_t site_idx, ScoreResult& score) {
  constexpr double kNormalCutoff = 2.0;
  if (!trait.saddlepoint || score.chisq < kNormalCutoff * kNormalCutoff) return;
  copy_column(trait, block, site_idx, scratch.fills[site_idx], scratch.column);
  // Scaled so that its variance is the saddlepoint's: the same z-score.
  const double variance = trait.tests->saddlepoint_variance(*trait.saddlepoint, scratch.column, score);
  if (!(variance > 0.0)) return;
  const double u = variance == score.v ? score.u : score.u * std::sqrt(variance / score.v);
  score.log_p = saddlepoint_score_log_p(*trait.saddlepoint, scratch.column, u, variance, kNormalCutoff).log_p;
}

std::string describe_discordance(const TraitContext& trait, const ResultRow& row) {
  char text[256];
  std::snprintf(text, sizeof text,
                "flag: %s %s: -log10 p score %.3f, Wald %.3f, LR %.3f (spread %.2f > %.2f)",
                trait.set.trait.c_str(), row.variant_id.c_str(), neg_log10_from_log(row.score_log_p),
                neg_log10_from_log(*row.wald_log_p), neg_log10_from_log(*row.lrt_log_p),
                *row.log10p_spread, trait.spread_flag);
  return text;
}

}  // namespace

bool SiteSummary::varies() const {
  if (called < 2) return false;
  const double mean = sum / static_cast<double>(called);
  // Dosages are at most 2 and come from text with a few decimals, so a
  // spread below 1e-12 can only be rounding in the sums.
  return sum_squares - mean * sum > 1e-12 * static_cast<double>(called);
}

void process_trait_block(const TraitContext& trait, const DosageBlock& block, const BlockTotals& totals,
                         const GatheredBlock& gathered, const std::vector<std::string>& chromosomes,
                         TraitScratch& scratch, TraitBlockOutput& output, const BlockSets* sets) {
  output.rows.clear();
  output.tally = TraitTally{};
  output.discordant_notes.clear();
  output.set_variants.clear();
  const std::size_t width = block.size();
  if (width == 0) return;

  scratch.summaries.resize(width);
  scratch.fills.resize(width);
  for (std::size_t site_idx = 0; site_idx < width; ++site_idx) {
    scratch.summaries[site_idx] = summary_from_totals(totals_for_samples(trait, block, totals, site_idx),
                                                      block.sites[site_idx].has_hard_calls);
    scratch.fills[site_idx] = scratch.summaries[site_idx].mean();
  }
  scratch.scores.resize(width);
  const ImputedDosages imputed{gathered.missing_rows.data(), gathered.missing_starts.data(), scratch.fills.data()};
  const KernelInput input = trait.tests->prepare_block(gathered, width, scratch.fills.data(), imputed, scratch.adjusted);
  scratch.extra_fields.clear();
  if (!trait.tests->score_block(input, width, scratch.scores.data(), scratch.extra_fields)) {
    trait.kernel->compute(input.genotypes, width, scratch.score_scratch, scratch.scores.data(), input.imputed);
  }

  ResultRow row;
  for (std::size_t site_idx = 0; site_idx < width; ++site_idx) {
    if (trait.selection && !trait.selection->takes(trait.set.trait, block.sites[site_idx].id,
                                                   make_variant_id(block.sites[site_idx], chromosomes[site_idx]))) {
      continue;
    }
    const SiteSummary& summary = scratch.summaries[site_idx];
    if (!summary.varies()) {
      ++output.tally.monomorphic;
      continue;
    }
    ScoreResult& score = scratch.scores[site_idx];
    if (!score.testable) {
      ++output.tally.in_covariate_span;
      continue;
    }
    fill_site_columns(trait, block.sites[site_idx], chromosomes[site_idx], summary, row);
    const int floor = failed_floor(trait.floors, row);
    if (floor != qc_reason_count) {
      ++output.tally.filtered[floor];
      continue;
    }
    calibrate_score(trait, block, scratch, site_idx, score);
    fill_score_columns(trait, score, row);
    row.extra_fields = scratch.extra_fields.empty() ? std::string() : scratch.extra_fields[site_idx];
    if (sets && trait.set_context) {
      collect_set_variant(trait, *trait.set_context, block, *sets, gathered, input,
                          scratch.score_scratch.projections.data(), site_idx, scratch.fills[site_idx], score, row,
                          output.set_variants);
    }
    if (should_confirm(trait, score.log_p)) {
      copy_column(trait, block, site_idx, scratch.fills[site_idx], scratch.column);
      confirm_row(trait, scratch.column, row, output.tally);
      if (row.log10p_spread && *row.log10p_spread > trait.spread_flag) {
        ++output.tally.discordant;
        output.discordant_notes.push_back(describe_discordance(trait, row));
      }
    }
    append_result_row(row, output.rows);
    ++output.tally.written;
  }
}

}  // namespace tamis
