// Variant sets in the per-trait stage: which sets each site of a block
// belongs to (once per block, for every trait), and for each trait the
// evidence a set test needs from each of its variants: the score, its
// projections on the null model's basis, and the sparse column the kernel
// read. Pure computation: no I/O.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"
#include "tamis/set_scan_options.hpp"
#include "tamis/variant_sets.hpp"

namespace tamis {

struct TraitContext;
struct GatheredBlock;
struct KernelInput;
struct ResultRow;
struct ScoreResult;

// A column over a trait's analysis samples (or, for the block's shared
// entries, over the genotype samples): its entries that are not 0, in sample
// order; or, where most are not 0 (imputed dosages), every value in sample
// order with `samples` left empty, so that products run over plain arrays.
struct SparseColumn {
  std::vector<std::uint32_t> samples;
  std::vector<double> values;
  bool dense() const { return samples.empty() && !values.empty(); }
  bool empty() const { return values.empty(); }
};

// Whether a column of `entries` non-zero values over `count` samples is kept dense.
inline bool keep_dense(std::size_t entries, std::size_t count) { return entries > count / 4; }

// The sets each site of a block belongs to.
struct BlockSets {
  std::vector<std::vector<SetMembership>> of_site;
  std::vector<std::string> contig_keys;  // set_contig_key of each site's contig
  // A member site's dosages that are not 0, over every genotype sample
  // (missing ones NaN): found at the first trait's request and read by the
  // others, so that a site's row is scanned once, not once per trait. Only
  // the thread that tests the block touches them, trait after trait.
  mutable std::vector<SparseColumn> genotype_entries;
  mutable std::vector<char> genotype_entries_found;
};

// Where a shard's cut at `first_position` of `contig` goes so that no set
// with a known extent straddles it: past the end of every set that holds
// both sides (and of any set that then straddles the new cut).
std::int64_t cut_outside_sets(const VariantSets& sets, const std::string& contig, std::int64_t first_position);

// Whether some list set names a variant by ID only (its position is unknown
// until the stream meets it).
bool has_id_only_entries(const VariantSets& sets);

// Fills `out` for every site of the block (one lookup per site, shared by all traits).
void find_block_sets(const VariantSets& sets, const DosageBlock& block, BlockSets& out);

// One variant's evidence for the sets that take it, for one trait.
struct SetVariant {
  std::string variant_id;
  std::string chromosome;  // as written in the results
  std::string contig_key;
  std::int64_t position = 0;
  double minor_allele_frequency = 0.0;
  double mac = 0.0;
  // -1 when the tested (ALT) allele is the major one: the set tests count
  // minor alleles, so its score and column change sign.
  double sign = 1.0;
  double u = 0.0;      // the kernel's score G'r (before the sign)
  double log_p = 0.0;  // the single-variant score test's ln p (saddlepoint-calibrated where it applies)
  // (W^1/2 Q)' g: the column's projections on the kernel's basis, p values.
  std::vector<double> projections;
  // The column the kernel read (dosages, or whitened dosages under a mixed
  // model) over the analysis samples, missing dosages imputed.
  SparseColumn column;
  // The plain dosages, kept only when the saddlepoint approximation needs
  // them and the kernel's column is whitened.
  SparseColumn dosages;
  std::vector<SetMembership> sets;
};

// Per trait: what set collection needs beyond the TraitContext.
struct TraitSetContext {
  double maf_ceiling = 0.01;
  // The kernel row of each analysis sample (where the kernel's own column is read).
  std::vector<std::size_t> kernel_row_of_sample;
  // The analysis row of each genotype sample; -1 where it is not analysed.
  std::vector<std::int32_t> analysis_row_of_genotype_sample;
};

// The analysis row of each of `genotype_samples` samples, -1 for those
// outside `genotype_index` (a trait's analysis samples, ascending).
std::vector<std::int32_t> analysis_row_of_genotype_sample(const std::vector<std::size_t>& genotype_index,
                                                          std::size_t genotype_samples);

// Adds the variant at `site_idx` to `out` when it belongs to a set, passed
// the trait's floors (the caller checks those) and lies below the MAF
// ceiling. `row` is the variant's result row (frequency, MAC, score p),
// `input` and `projections` what the kernel read and accumulated for the
// block (projections[c * width + site_idx], c < p).
void collect_set_variant(const TraitContext& trait, const TraitSetContext& sets, const DosageBlock& block,
                         const BlockSets& block_sets, const GatheredBlock& gathered, const KernelInput& input,
                         const double* projections, std::size_t site_idx, double fill, const ScoreResult& score,
                         const ResultRow& row, std::vector<SetVariant>& out);

}  // namespace tamis
