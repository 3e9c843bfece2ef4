#include "haplotype_blocks.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>

#include "genes.hpp"

namespace tamis::simulation {
namespace {

constexpr std::uint64_t kBlockStream = 6;
constexpr std::size_t kFewestHaplotypes = 4;
constexpr std::size_t kMostHaplotypes = 8;
// How far the two founding groups' haplotype frequencies drift apart (SD of
// a log-normal factor on each frequency).
constexpr double kGroupDrift = 0.4;
// A common variant sits on its neighbour's branch with probability
// kSameBranch; otherwise on a random branch, or, with probability
// kComplement, on the haplotypes outside it.
constexpr double kSameBranch = 0.5;
constexpr double kComplement = 0.3;
// The noise that keeps LD below perfect (per founder chromosome and variant).
constexpr double kSwitch = 0.01;
constexpr double kFlip = 0.005;
// Planted variants are common: their branch's frequency is the closest to a
// draw from this range.
constexpr double kPlantedLow = 0.15;
constexpr double kPlantedHigh = 0.45;

// The signal locus: haplotype h carries signal k when bit k of h is set.
// Frequencies: none 0.45, all three 0.25, each pair 0.04, each single 0.06;
// for any two signals p = 0.39, p_both = 0.29, so r² = (0.29 - 0.39²)² /
// (0.39 · 0.61)² = 0.336 before the noise.
constexpr std::size_t kLocusHaplotypes = 8;
constexpr double kLocusFrequencies[kLocusHaplotypes] = {0.45, 0.06, 0.06, 0.04, 0.06, 0.04, 0.04, 0.25};
constexpr std::size_t kLocusHalfWidth = 12;
// Offsets of the signals from the anchor, the first being the anchor itself.
constexpr long kSignalOffsets[3] = {0, 6, -7};
// The locus block's other variants tag one signal with this probability;
// the rest are carried by two signals together or by either of two.
constexpr double kLocusTag = 0.7;

std::uint32_t signal_mask(std::size_t signal) {
  std::uint32_t mask = 0;
  for (std::size_t haplotype = 0; haplotype < kLocusHaplotypes; ++haplotype) {
    if (haplotype & (std::size_t{1} << signal)) mask |= 1u << haplotype;
  }
  return mask;
}

std::vector<double> normalised(std::vector<double> weights) {
  double total = 0.0;
  for (double weight : weights) total += weight;
  for (double& weight : weights) weight /= total;
  return weights;
}

double mask_frequency(std::uint32_t mask, const std::vector<double>& frequencies) {
  double total = 0.0;
  for (std::size_t haplotype = 0; haplotype < frequencies.size(); ++haplotype) {
    if (mask & (1u << haplotype)) total += frequencies[haplotype];
  }
  return total;
}

double draw_exponential(Random& random) {
  double uniform = random.uniform();
  while (uniform <= 0.0) uniform = random.uniform();
  return -std::log(uniform);
}

// The first index whose cumulative weight exceeds `uniform` (the last one if
// rounding leaves the total just below it).
template <typename Weight>
std::size_t pick_by_weight(std::size_t count, double uniform, Weight weight) {
  double cumulative = 0.0;
  for (std::size_t index = 0; index + 1 < count; ++index) {
    cumulative += weight(index);
    if (uniform < cumulative) return index;
  }
  return count - 1;
}

std::string block_name(std::size_t block_idx) {
  char name[24];
  std::snprintf(name, sizeof name, "SRB%04zu", block_idx + 1);
  return name;
}

}  // namespace

SignalLocus place_signal_locus(std::size_t anchor, int signals, std::size_t contig_first,
                               std::size_t contig_size) {
  SignalLocus locus;
  const bool fits = anchor >= contig_first + kLocusHalfWidth && anchor + kLocusHalfWidth < contig_first + contig_size;
  if (!fits) return locus;
  locus.first_variant = anchor - kLocusHalfWidth;
  locus.last_variant = anchor + kLocusHalfWidth;
  for (int signal = 0; signal < signals; ++signal) {
    locus.signal_variants.push_back(static_cast<std::size_t>(static_cast<long>(anchor) + kSignalOffsets[signal]));
  }
  return locus;
}

HaplotypeBlocks::HaplotypeBlocks(const std::vector<std::vector<std::int64_t>>& positions, double mean_variants,
                                 const SignalLocus& locus, std::uint64_t seed)
    : random_(stream_seed(seed, kBlockStream)), locus_(locus) {
  lay_out(positions, mean_variants);
  for (Block& block : blocks_) {
    if (block.signal_locus) {
      build_signal_locus(block);
    } else {
      draw_haplotypes(block);
    }
  }
}

// Exponential block lengths; the signal locus, if any, is a block of its own
// and cuts the blocks it overlaps.
void HaplotypeBlocks::lay_out(const std::vector<std::vector<std::int64_t>>& positions, double mean_variants) {
  const bool has_locus = !locus_.signal_variants.empty();
  std::size_t contig_first = 0;
  for (std::size_t contig = 0; contig < positions.size(); ++contig) {
    const std::size_t contig_end = contig_first + positions[contig].size();
    std::size_t first = contig_first;
    while (first < contig_end) {
      const auto length =
          std::max<std::size_t>(1, static_cast<std::size_t>(std::lround(mean_variants * draw_exponential(random_))));
      std::size_t last = std::min(first + length, contig_end) - 1;
      bool signal_locus = false;
      if (has_locus && first <= locus_.last_variant && last >= locus_.first_variant) {
        if (first < locus_.first_variant) {
          last = locus_.first_variant - 1;
        } else {
          first = locus_.first_variant;
          last = locus_.last_variant;
          signal_locus = true;
        }
      }
      Block block;
      block.contig = contig;
      block.first_variant = first;
      block.last_variant = last;
      block.signal_locus = signal_locus;
      blocks_.push_back(std::move(block));
      first = last + 1;
    }
    contig_first = contig_end;
  }
}

// Haplotype frequencies shared by both founding groups up to a drift, and a
// genealogy of the haplotypes built by joining two random lineages at a time.
void HaplotypeBlocks::draw_haplotypes(Block& block) {
  const std::size_t count = kFewestHaplotypes + random_.index(kMostHaplotypes - kFewestHaplotypes + 1);
  std::vector<double> shared(count), group_a(count), group_b(count);
  for (std::size_t haplotype = 0; haplotype < count; ++haplotype) {
    shared[haplotype] = draw_exponential(random_);
    group_a[haplotype] = shared[haplotype] * std::exp(kGroupDrift * random_.normal());
    group_b[haplotype] = shared[haplotype] * std::exp(kGroupDrift * random_.normal());
  }
  block.frequency_a = normalised(group_a);
  block.frequency_b = normalised(group_b);
  std::vector<std::uint32_t> lineages;
  for (std::size_t haplotype = 0; haplotype < count; ++haplotype) lineages.push_back(1u << haplotype);
  block.branches = lineages;
  while (lineages.size() > 2) {  // the last join is the root, which every haplotype carries
    const std::size_t first = random_.index(lineages.size());
    std::swap(lineages[first], lineages.back());
    const std::uint32_t joined = lineages.back();
    lineages.pop_back();
    const std::size_t second = random_.index(lineages.size());
    lineages[second] |= joined;
    block.branches.push_back(lineages[second]);
  }
}

void HaplotypeBlocks::build_signal_locus(Block& block) {
  block.frequency_a.assign(std::begin(kLocusFrequencies), std::end(kLocusFrequencies));
  block.frequency_b = block.frequency_a;
  for (std::size_t signal = 0; signal < 3; ++signal) block.branches.push_back(signal_mask(signal));
}

std::uint32_t HaplotypeBlocks::choose_common_mask(const Block& block, bool planted) {
  const std::size_t count = block.frequency_a.size();
  const std::uint32_t all = (1u << count) - 1;
  if (block.signal_locus) {
    const std::uint32_t first = block.branches[random_.index(3)];
    if (random_.bernoulli(kLocusTag)) return first;
    const std::uint32_t second = block.branches[random_.index(3)];
    return random_.bernoulli(0.5) ? (first & second) : (first | second);
  }
  if (planted) {
    const double target = random_.uniform(kPlantedLow, kPlantedHigh);
    std::uint32_t best = block.branches.front();
    double best_distance = 2.0;
    for (std::uint32_t branch : block.branches) {
      for (std::uint32_t mask : {branch, all & ~branch}) {
        const double frequency =
            0.5 * (mask_frequency(mask, block.frequency_a) + mask_frequency(mask, block.frequency_b));
        const double distance = std::fabs(frequency - target);
        if (distance < best_distance) {
          best_distance = distance;
          best = mask;
        }
      }
    }
    return best;
  }
  if (previous_mask_ != 0 && random_.bernoulli(kSameBranch)) return previous_mask_;
  const std::uint32_t branch = block.branches[random_.index(block.branches.size())];
  return random_.bernoulli(kComplement) ? (all & ~branch) : branch;
}

void HaplotypeBlocks::start_variant(std::size_t variant_idx, bool rare, double rare_frequency, bool planted) {
  while (variant_idx > blocks_[block_idx_].last_variant) ++block_idx_;
  const Block& block = blocks_[block_idx_];
  block_start_ = variant_idx == block.first_variant;
  if (block_start_) previous_mask_ = 0;
  const auto signal = std::find(locus_.signal_variants.begin(), locus_.signal_variants.end(), variant_idx);
  if (signal != locus_.signal_variants.end()) {
    mask_ = block.branches[static_cast<std::size_t>(signal - locus_.signal_variants.begin())];
    rare_haplotype_ = -1;
  } else if (rare && !planted) {
    // One haplotype (by its average frequency) carries the variant; the
    // share of its copies is set so that the variant's frequency is about
    // the one asked for.
    auto average = [&block](std::size_t haplotype) {
      return 0.5 * (block.frequency_a[haplotype] + block.frequency_b[haplotype]);
    };
    const std::size_t haplotype = pick_by_weight(block.frequency_a.size(), random_.uniform(), average);
    rare_haplotype_ = static_cast<int>(haplotype);
    rare_share_ = std::min(1.0, rare_frequency / average(haplotype));
    mask_ = 0;
  } else {
    mask_ = choose_common_mask(block, planted);
    rare_haplotype_ = -1;
  }
  if (rare_haplotype_ < 0) previous_mask_ = mask_;
}

double HaplotypeBlocks::expected_frequency(double ancestry) const {
  const Block& block = blocks_[block_idx_];
  if (rare_haplotype_ >= 0) {
    const auto haplotype = static_cast<std::size_t>(rare_haplotype_);
    return rare_share_ * (ancestry * block.frequency_a[haplotype] + (1.0 - ancestry) * block.frequency_b[haplotype]);
  }
  return ancestry * mask_frequency(mask_, block.frequency_a) +
         (1.0 - ancestry) * mask_frequency(mask_, block.frequency_b);
}

int HaplotypeBlocks::draw_haplotype(double ancestry, Random& random) const {
  const Block& block = blocks_[block_idx_];
  auto mixed = [&block, ancestry](std::size_t haplotype) {
    return ancestry * block.frequency_a[haplotype] + (1.0 - ancestry) * block.frequency_b[haplotype];
  };
  return static_cast<int>(pick_by_weight(block.frequency_a.size(), random.uniform(), mixed));
}

void HaplotypeBlocks::draw_founder_alleles(double ancestry, Random& random, std::array<int, 2>& haplotypes,
                                           int* alleles) const {
  for (int copy_idx = 0; copy_idx < 2; ++copy_idx) {
    int& haplotype = haplotypes[static_cast<std::size_t>(copy_idx)];
    if (block_start_ || random.bernoulli(kSwitch)) haplotype = draw_haplotype(ancestry, random);
    if (rare_haplotype_ >= 0) {
      alleles[copy_idx] = haplotype == rare_haplotype_ && random.bernoulli(rare_share_) ? 1 : 0;
      continue;
    }
    const int carried = (mask_ >> haplotype) & 1u ? 1 : 0;
    alleles[copy_idx] = random.bernoulli(kFlip) ? 1 - carried : carried;
  }
}

// The blocks are windows of variants like the genes, in the genes' BED layout.
void HaplotypeBlocks::write_bed(const std::vector<std::vector<std::int64_t>>& positions,
                                const std::string& path) const {
  std::vector<SimulatedGene> windows;
  for (std::size_t block_idx = 0; block_idx < blocks_.size(); ++block_idx) {
    const Block& block = blocks_[block_idx];
    windows.push_back(SimulatedGene{block_name(block_idx), block.contig, block.first_variant, block.last_variant});
  }
  write_gene_bed(windows, positions, path);
}

}  // namespace tamis::simulation
