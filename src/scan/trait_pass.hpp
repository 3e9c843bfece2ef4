// One trait's work on one decoded block: summarise and impute the dosages of
// the trait's analysis samples, run the blocked score test, confirm the hits
// and format the rows. Pure computation: no I/O.
#pragma once

#include <memory>
#include <optional>
#include <string>
#include <utility>
#include <vector>

#include "scan/set_collection.hpp"
#include "scan/trait_model.hpp"
#include "tamis/confirm.hpp"
#include "tamis/logistic_mixed_model.hpp"
#include "tamis/mixed_model.hpp"
#include "tamis/saddlepoint.hpp"
#include "tamis/genotype_reader.hpp"
#include "tamis/null_model.hpp"
#include "tamis/scan.hpp"
#include "tamis/score_kernel.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {

struct TraitContext {
  AnalysisSet set;
  NullModel model;
  std::unique_ptr<ScoreKernel> kernel;
  std::unique_ptr<MixedModel> mixed;   // with --relatedness: the kernel's model is its whitened GLS fit
  std::unique_ptr<LogisticMixedModel> logistic_mixed;  // the same for a binary trait
  std::string null_model_summary;      // a mixed model's fit, for the sidecar
  std::unique_ptr<TraitModel> tests;   // the block the kernel reads and the refit of hits
  std::unique_ptr<SaddlepointContext> saddlepoint;  // binary traits with --binary-score spa
  double confirm_below = 1e-4;
  double spread_flag = 1.0;
  const VariantSelection* selection = nullptr;  // null: every variant
  QcFloors floors;
  int haploid_dosage = 1;
  // The genotype samples outside the analysis set, in genotype order.
  std::vector<std::size_t> excluded_genotype_index;
  // Those of them that not every trait leaves out (see share_left_out_samples).
  std::vector<std::size_t> excluded_beyond_shared;
  // The genotype sample of each row of the kernel's blocks: every genotype
  // sample when few are outside the analysis set (a block gathered once then
  // serves all such traits), else the analysis samples alone.
  std::vector<std::size_t> kernel_row_samples;
  // With --sets: what collecting set variants needs; null otherwise.
  std::unique_ptr<TraitSetContext> set_context;
};

// Rows for a trait's kernel blocks (TraitContext::kernel_row_samples), and
// the kernel with its analysis samples placed in them.
std::vector<std::size_t> choose_kernel_rows(const AnalysisSet& set, std::size_t genotype_sample_count,
                                            std::size_t excluded_count);
std::unique_ptr<ScoreKernel> make_kernel(const TraitContext& trait);
// The kernel row of each analysis sample.
std::vector<std::size_t> kernel_row_of_sample(const TraitContext& trait);

// Dosage summary of one site over a trait's analysis samples.
struct SiteSummary {
  std::size_t called = 0;
  double sum = 0.0;
  double sum_squares = 0.0;
  // Allele counting over the actual ploidy (from GT where the record has it).
  double allele_count = 0.0;
  double allele_slots = 0.0;
  std::uint64_t hom_ref = 0, het = 0, hom_alt = 0;  // diploid hard calls
  std::optional<double> hwe_log_p;  // from the hard calls, for sites that vary
  double mean() const { return called ? sum / static_cast<double>(called) : 0.0; }
  bool varies() const;
};

// Sums of one site's dosages and calls over a set of samples. All are kept
// as doubles (the counts exactly), so that samples can be taken out again.
struct SiteTotals {
  double called = 0.0, sum = 0.0, squares = 0.0;
  double slots = 0.0, copies = 0.0;  // alleles over the actual ploidy, from GT
  double hom_ref = 0.0, het = 0.0, hom_alt = 0.0;
};

// Every site's totals over all genotype samples but those that every trait
// leaves out: computed once per block, whatever the number of traits.
struct BlockTotals {
  std::vector<SiteTotals> sites;
};

// Whether a trait's site totals are the block's less its left-out samples
// (when those are the fewer), rather than a sum over its analysis samples.
bool subtracts_left_out(const TraitContext& trait);

// The samples that every trait taking totals by subtraction leaves out
// (often those the table lacks, or that miss a shared covariate): removed
// from the block's totals once instead of once per trait.
std::vector<std::size_t> samples_left_out_by_all(const std::vector<TraitContext>& traits);
// Sets each trait's excluded_beyond_shared.
void note_left_out_beyond_shared(const std::vector<std::size_t>& left_out_by_all, std::vector<TraitContext>& traits);

// `left_out_by_all` comes from samples_left_out_by_all.
void total_block(const DosageBlock& block, int haploid_dosage, const std::vector<std::size_t>& left_out_by_all,
                 BlockTotals& totals);

// A block's dosages gathered for one list of kernel rows: traits with the
// same rows share it. Imputation is left to each trait's kernel, through the
// list of missing dosages, since each trait imputes its own mean.
struct GatheredBlock {
  std::vector<double> genotypes;  // sample-major, a missing dosage as 0
  std::vector<std::uint32_t> missing_rows;  // per site, the rows whose dosage is missing
  std::vector<std::size_t> missing_starts;  // site j's are missing_rows[starts[j] .. starts[j + 1])
  // gather_block's scratch: (site, row) of each missing dosage, as the copy meets them.
  std::vector<std::pair<std::uint32_t, std::uint32_t>> missing_found;
};

struct TraitScratch {
  std::vector<SiteSummary> summaries;
  std::vector<double> fills;  // each site's imputed value: the mean over the analysis samples
  std::vector<ScoreResult> scores;
  ScoreScratch score_scratch;
  std::vector<double> adjusted;  // the block as a model adjusted it for the kernel (whitened rows)
  std::vector<std::string> extra_fields;  // per site: a model's extra columns (TraitModel::score_block)
  Eigen::VectorXd column;
};

struct TraitBlockOutput {
  std::string rows;
  TraitTally tally;
  std::vector<std::string> discordant_notes;  // one line per flagged hit
  std::vector<SetVariant> set_variants;       // with --sets: the block's variants that sets take, in order
};

// Gathers the block's dosages of the samples `row_samples` (a trait's
// kernel_row_samples), sample-major.
void gather_block(const std::vector<std::size_t>& row_samples, const DosageBlock& block, GatheredBlock& gathered);

// `gathered` comes from gather_block for this trait's kernel rows, `totals`
// from total_block for this block; `chromosomes[site_idx]` is the contig
// name as it is to be written; `sets`, with --sets, the sets of each site
// (find_block_sets).
void process_trait_block(const TraitContext& trait, const DosageBlock& block, const BlockTotals& totals,
                         const GatheredBlock& gathered, const std::vector<std::string>& chromosomes,
                         TraitScratch& scratch, TraitBlockOutput& output, const BlockSets* sets = nullptr);

}  // namespace tamis
