// The scan pipeline: read genotypes serially, decode and test blocks in
// parallel, write rows in input order.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <map>
#include <set>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"
#include "tamis/interaction.hpp"
#include "tamis/set_scan_options.hpp"
#include "tamis/trait_table.hpp"
#include "tamis/types.hpp"

namespace tamis {

enum class ChromosomeCodes { ssf, as_is };
enum class BinaryScore { plain, saddlepoint };
// When a binary trait's confirmation uses Firth's penalised likelihood:
// automatic = when the standard fit fails or separates, or the minor allele
// count is below kFirthBelowMinorAlleleCount.
enum class PenalizedRefit { automatic, always, never };
inline constexpr double kFirthBelowMinorAlleleCount = 40.0;

// Variants chosen by list (--variants, or the rows of earlier results that
// `tamis confirm` takes up). Empty means every variant.
struct VariantSelection {
  std::set<std::string> variant_ids;  // chromosome_position_ref_alt, chromosome as it is written out
  // Every entry of a list as written, matched against the VCF ID column; a
  // complete chr:pos:ref:alt entry is also in variant_ids.
  std::set<std::string> record_ids;
  std::map<std::string, std::set<std::string>> trait_variant_ids;  // for one trait only
  bool active() const { return !variant_ids.empty() || !record_ids.empty() || !trait_variant_ids.empty(); }
  std::size_t size() const;  // list entries and results rows taken
  // Whether a trait takes a record's allele: `id` is the record's ID column,
  // matched whole or as one of its semicolon-separated IDs (VCF 4.3, 1.6.1);
  // `variant_id` is the allele's chromosome_position_ref_alt.
  bool takes(const std::string& trait, const std::string& id, const std::string& variant_id) const;
};

// Adds, for the results file's trait, its rows whose p-value is below
// `below`, and the index regions that hold them. The trait is the one the
// file's metadata sidecar names (else the file name's). Throws tamis::Error
// (results_input).
void select_from_results(const std::string& results_path, double below, VariantSelection& selection,
                         std::vector<GenomicRegion>& regions);

// For `confirm` of set results (PREFIX.TRAIT.sets.tsv.gz): the sets whose
// overall p-value is below `below`, and their extents as index regions, so
// that every variant there is refitted. Throws tamis::Error (results_input).
void select_sets_from_results(const std::string& set_results_path, double below, std::set<std::string>& set_names,
                              std::vector<GenomicRegion>& regions);
bool is_set_results_path(const std::string& path);

// Adds the variants of a list file, one per line. A complete chr:pos:ref:alt
// (position from 1, alleles in bases, ALT also * or <ID>) is taken both as
// that allele and as an ID, and adds an index region at its position; any
// other line (rs12345, chr1:16190, 1:12345:A, HLA-A*01:01:01:01) is an ID only.
// Returns false when an ID-only entry means the files must be read whole.
// Throws tamis::Error (usage) for a line that cannot be an ID.
bool select_from_list(const std::string& list_path, ChromosomeCodes codes, VariantSelection& selection,
                      std::vector<GenomicRegion>& regions);

// The conditioning variants of a list file (--conditioning-variants), one per line
// (blank lines and '#' comments skipped). Throws tamis::Error (usage) for an
// unreadable file.
std::vector<std::string> read_condition_list(const std::string& path);

// Variant QC floors, applied per trait on its analysis samples; 0 turns one off.
struct QcFloors {
  double minor_allele_frequency = 0.0;
  double minor_allele_count = 0.0;
  double info = 0.0;
  double call_rate = 0.0;
  double hwe_p = 0.0;
};
enum QcReason { qc_maf, qc_mac, qc_info, qc_call_rate, qc_hwe, qc_reason_count };
inline constexpr const char* kQcReasonNames[qc_reason_count] = {"minor allele frequency", "minor allele count",
                                                               "info", "call rate", "Hardy-Weinberg p"};

struct ScanOptions {
  std::vector<std::string> genotype_paths;
  std::string traits_path;
  TableOptions table;
  std::vector<std::string> traits;
  std::map<std::string, TraitKind> kind_overrides;
  std::vector<std::string> covariates;
  DosageField dosage_field = DosageField::automatic;
  double confirm_below = 1e-4;  // 0: no confirmation; >= 1: confirm every variant
  double spread_flag = 1.0;     // log10 units of disagreement that flag a confirmed hit
  BinaryScore binary_score = BinaryScore::saddlepoint;
  PenalizedRefit penalized_refit = PenalizedRefit::automatic;
  std::string out_prefix;
  int threads = 1;
  ChromosomeCodes chromosome_codes = ChromosomeCodes::ssf;
  std::string genome_assembly;
  std::string command_line;  // recorded in the log
  bool quiet = false;        // no progress display
  bool resume = false;       // continue an interrupted run from its checkpoint
  int shard = 0;             // --shard K/N: K (1-based) and N; 0 when not sharded
  int shard_count = 0;
  std::vector<GenomicRegion> regions;  // --region: read only these, through the index
  VariantSelection selection;
  // --relatedness: the files of one relatedness matrix (a whole one, or the
  // parts of one); quantitative traits then get a linear mixed null model.
  std::vector<std::string> relatedness_paths;
  // --condition-on: variants (chr:pos:ref:alt or IDs) whose dosages join
  // every trait's covariates.
  std::vector<std::string> condition_on;
  // --interaction-with: the exposure E (a covariate, numeric or text); every
  // variant is tested for its interaction with E, with robust variances.
  std::string interaction_with;
  RobustErrors robust_errors = RobustErrors::hc0;
  QcFloors floors;
  SetScanOptions sets;  // --sets: variant-set tests beside the single-variant ones
  std::string keep_samples_path;  // one sample ID per line
  std::string drop_samples_path;
  std::vector<std::string> rank_normalize;  // quantitative traits given the rank-based inverse normal transform
  int haploid_dosage = 1;                   // dosage of a haploid ALT call from GT: 1 or 2
  // 0: chosen from the sample count, so that a block stays in cache.
  std::size_t records_per_block = 0;
  // Outputs are flushed to a block boundary and the checkpoint is saved every
  // this many blocks, in every run, so a resumed file is byte-identical.
  std::size_t blocks_per_checkpoint = 64;
  // Called by the serial writer after each block is written (and its
  // checkpoint saved, if due), with the number of blocks written so far.
  // Tests use it to interrupt a scan at a chosen block instead of racing a
  // timer; not part of the run's description.
  std::function<void(std::uint64_t blocks_written)> after_block;
};

// Per-trait tallies of what happened to each tested allele.
struct TraitTally {
  std::uint64_t written = 0;
  std::uint64_t monomorphic = 0;
  std::uint64_t in_covariate_span = 0;  // no variation left once covariates are adjusted for
  std::uint64_t confirmed = 0;
  std::uint64_t discordant = 0;  // confirmed with log10p_spread above the flag
  std::uint64_t confirm_not_converged = 0;
  std::uint64_t firth = 0;     // confirmed by Firth's penalised likelihood
  std::uint64_t filtered[qc_reason_count] = {0, 0, 0, 0, 0};  // below a variant QC floor, by reason
};

struct ScanSummary {
  std::uint64_t records = 0;
  std::uint64_t alleles = 0;
  std::vector<std::string> result_files;
  std::map<std::string, TraitTally> tallies;
  std::vector<std::string> set_files;  // with --sets, per trait
};

// Runs the whole scan. Throws tamis::Error for anything the user can fix;
// no result file exists under its final name unless the scan completed.
ScanSummary run_scan(const ScanOptions& options);

// The result file name of one trait, and of its set tests.
std::string result_path(const std::string& out_prefix, const std::string& trait);
std::string set_result_path(const std::string& out_prefix, const std::string& trait);

}  // namespace tamis
