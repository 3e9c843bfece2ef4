#include "tamis/scan.hpp"

#include <tbb/enumerable_thread_specific.h>
#include <tbb/global_control.h>
#include <tbb/parallel_for.h>
#include <tbb/parallel_pipeline.h>

#include <chrono>
#include <cstdio>
#include <optional>
#include <cmath>
#include <algorithm>
#include <memory>
#include <mutex>
#include <fstream>
#include <sstream>

#include "scan/block_sizing.hpp"
#include "scan/checkpoint.hpp"
#include "scan/conditioning.hpp"
#include "scan/interaction_model.hpp"
#include "scan/progress.hpp"
#include "scan/related_samples.hpp"
#include "scan/sample_lists.hpp"
#include "scan/set_accumulator.hpp"
#include "scan/trait_setup.hpp"
#include "scan/trait_pass.hpp"
#include "tamis/errors.hpp"
#include "tamis/trait_transform.hpp"
#include "tamis/results_writer.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

std::string join(const std::vector<std::string>& items, const char* separator) {
  std::string text;
  for (std::size_t item_idx = 0; item_idx < items.size(); ++item_idx) {
    if (item_idx) text += separator;
    text += items[item_idx];
  }
  return text;
}

std::string format_number(double value) {
  char text[64];
  std::snprintf(text, sizeof text, "%.9g", value);
  return text;
}

void log_inputs(const ScanOptions& options, const GenotypeReader& reader, const TraitTable& table) {
  RunLog& log = current_log();
  log.detail("command: " + options.command_line);
  log.detail(std::string("version: tamis ") + TAMIS_VERSION);
  for (std::size_t file_idx = 0; file_idx < reader.paths().size(); ++file_idx) {
    log.detail("genotypes: " + reader.paths()[file_idx] + " (dosage from " +
               dosage_field_name(reader.resolved_field(file_idx)) + ")");
  }
  log.detail("traits table: " + table.path() + " (" + std::to_string(table.row_count()) +
             " rows, sample column '" + table.sample_column_name() + "')");
  log.detail("covariates: " + (options.covariates.empty() ? std::string("(none)") : join(options.covariates, ", ")));
  log.line("samples: " + std::to_string(reader.sample_ids().size()) + " in the genotype files, " +
           std::to_string(table.row_count()) + " rows in the table");
}

void log_conditions(const std::vector<ConditionVariant>& conditions) {
  for (const ConditionVariant& variant : conditions) {
    current_log().line("conditioning on " + variant.label + (variant.requested == variant.label ? std::string()
                       : " (" + variant.requested + ")") + ": its dosages join every trait's covariates");
  }
}

void log_samples(const AnalysisSet& set) {
  const SampleAccounting& count = set.accounting;
  std::ostringstream text;
  text << "trait " << set.trait << " (" << trait_kind_name(set.kind) << "): " << count.analysed
       << " analysis samples; matched " << count.matched << ", dropped " << count.genotype_only
       << " not in the table, " << count.missing_trait << " missing the trait, "
       << count.missing_covariate << " missing a covariate";
  if (count.excluded_by_list) text << ", " << count.excluded_by_list << " left out by --keep-samples/--drop-samples";
  text << "; " << count.table_only
       << " table rows without genotypes";
  if (set.kind == TraitKind::binary) {
    text << "; " << set.case_count << " cases, " << set.control_count << " controls";
  }
  current_log().line(text.str());
  for (const auto& [covariate, level] : set.reference_levels) {
    current_log().detail("  " + covariate + ": reference level '" + level + "'");
  }
}

void log_null_model(const std::string& trait, const NullModel& model) {
  RunLog& log = current_log();
  if (!model.dropped_columns.empty()) {
    log.line("trait " + trait + ": dropped collinear covariate columns: " + join(model.dropped_columns, ", "));
  }
  std::ostringstream text;
  text << "null model " << trait << ": ";
  if (model.kind == TraitKind::quantitative) {
    text << "least squares, sigma^2 = " << format_number(model.sigma2);
  } else {
    text << "logistic, " << model.iterations << " IRLS iterations, deviance = " << format_number(model.rss);
  }
  text << ", log-likelihood = " << format_number(model.log_likelihood);
  log.line(text.str());
  for (int column_idx = 0; column_idx < model.column_count(); ++column_idx) {
    log.detail("  " + model.column_names[static_cast<std::size_t>(column_idx)] + " = " +
               format_number(model.coefficients[column_idx]));
  }
}

void apply_rank_normalization(const ScanOptions& options, AnalysisSet& set) {
  if (std::find(options.rank_normalize.begin(), options.rank_normalize.end(), set.trait) ==
      options.rank_normalize.end()) {
    return;
  }
  if (set.kind != TraitKind::quantitative) {
    throw Error(ExitCode::usage, "--rank-normalize " + set.trait, "the trait is binary",
                "rank-normalise quantitative traits only");
  }
  set.y = rank_inverse_normal(set.y);
  current_log().line("trait " + set.trait + ": rank-based inverse normal transform (Blom offset 3/8) on " +
                     std::to_string(set.y.size()) + " analysis samples");
}

std::vector<std::size_t> samples_outside(const std::vector<std::size_t>& genotype_index, std::size_t sample_count) {
  std::vector<bool> inside(sample_count, false);
  for (std::size_t sample : genotype_index) inside[sample] = true;
  std::vector<std::size_t> outside;
  for (std::size_t sample = 0; sample < sample_count; ++sample) {
    if (!inside[sample]) outside.push_back(sample);
  }
  return outside;
}

}  // namespace

AnalysisSet prepare_analysis_set(const ScanOptions& options, const TraitTable& table,
                                 const std::vector<std::string>& samples, const std::vector<bool>& excluded,
                                 const std::string& trait) {
  AnalysisRequest request;
  request.trait = trait;
  request.covariates = options.covariates;
  auto override_it = options.kind_overrides.find(request.trait);
  if (override_it != options.kind_overrides.end()) request.kind_override = override_it->second;
  request.excluded_samples = excluded;
  AnalysisSet set = build_analysis_set(table, samples, request);
  log_samples(set);
  apply_rank_normalization(options, set);
  return set;
}

void fit_trait_null_model(const ScanOptions& options, const std::vector<std::string>& samples,
                          const ScanRelatedness* relatedness, TraitContext& trait) {
  const std::string& name = trait.set.trait;
  try {
    trait.model = fit_null_model(name, trait.set.kind, trait.set.y, trait.set.design, trait.set.design_names);
  } catch (const Error& error) {
    // The model knows the trait, not the file: name the table it came from.
    throw Error(error.code(), options.traits_path + ", column '" + name + "'",
                error.where().empty() ? error.problem() : error.where() + ": " + error.problem(), error.fix());
  }
  if (relatedness) {
    fit_mixed_null_model(*relatedness, samples, trait);
  } else {
    log_null_model(name, trait.model);
  }
}

namespace {

std::vector<TraitContext> prepare_traits(const ScanOptions& options, const TraitTable& table,
                                         const std::vector<std::string>& samples,
                                         const ScanRelatedness* relatedness,
                                         const std::vector<ConditionVariant>& conditions) {
  std::vector<TraitContext> traits(options.traits.size());
  const std::vector<bool> excluded = excluded_samples(options.keep_samples_path, options.drop_samples_path, samples);
  for (std::size_t trait_idx = 0; trait_idx < options.traits.size(); ++trait_idx) {
    TraitContext& trait = traits[trait_idx];
    trait.set = prepare_analysis_set(options, table, samples, excluded, options.traits[trait_idx]);
    add_condition_columns(conditions, trait.set);
    fit_trait_null_model(options, samples, relatedness, trait);
    trait.confirm_below = options.confirm_below;
    trait.spread_flag = options.spread_flag;
    if (options.selection.active()) trait.selection = &options.selection;
    trait.floors = options.floors;
    trait.haploid_dosage = options.haploid_dosage;
    trait.excluded_genotype_index = samples_outside(trait.set.genotype_index, samples.size());
    trait.kernel_row_samples =
        choose_kernel_rows(trait.set, samples.size(), trait.excluded_genotype_index.size());
  }
  note_left_out_beyond_shared(samples_left_out_by_all(traits), traits);
  // The kernels hold references to the models, so they are made once the vector is final.
  for (TraitContext& trait : traits) {
    trait.kernel = make_kernel(trait);
    const bool mixed = trait.mixed || trait.logistic_mixed;
    const bool interaction = !options.interaction_with.empty();
    trait.tests = mixed         ? make_mixed_model(trait, kernel_row_of_sample(trait))
                  : interaction ? make_interaction_model(trait, options.interaction_with, options.robust_errors)
                                : make_plain_model(trait.model, options.penalized_refit);
    // The saddlepoint approximation is of the main effect's score.
    if (trait.set.kind == TraitKind::binary && options.binary_score == BinaryScore::saddlepoint && !interaction) {
      // Under the logistic mixed model, the outcomes are Bernoulli given b-hat.
      trait.saddlepoint = std::make_unique<SaddlepointContext>(
          trait.logistic_mixed ? trait.logistic_mixed->conditional_model() : trait.model);
    }
    if (options.sets.active()) {
      trait.set_context = std::make_unique<TraitSetContext>();
      trait.set_context->maf_ceiling = options.sets.maf_ceiling;
      trait.set_context->kernel_row_of_sample = kernel_row_of_sample(trait);
      trait.set_context->analysis_row_of_genotype_sample =
          analysis_row_of_genotype_sample(trait.set.genotype_index, samples.size());
    }
  }
  return traits;
}

// Work carried through the pipeline for one batch of records.
struct BlockWork {
  RecordBatch batch;
  DosageBlock block;
  std::vector<std::string> chromosomes;
  BlockSets sets;  // with --sets
  std::vector<TraitBlockOutput> outputs;
};

// The pipeline's blocks, owned here rather than by the items in flight: a
// block is reused with its buffers (decoding then allocates nothing), and
// when a stage throws and the pipeline is cancelled, nothing TBB still holds
// is left unfreed. The reader and the writer run concurrently, hence the lock.
class BlockPool {
 public:
  BlockWork* take() {
    std::lock_guard<std::mutex> lock(mutex_);
    if (free_.empty()) {
      owned_.push_back(std::make_unique<BlockWork>());
      return owned_.back().get();
    }
    BlockWork* work = free_.back();
    free_.pop_back();
    return work;
  }
  void give_back(BlockWork* work) {
    std::lock_guard<std::mutex> lock(mutex_);
    free_.push_back(work);
  }

 private:
  std::mutex mutex_;
  std::vector<std::unique_ptr<BlockWork>> owned_;
  std::vector<BlockWork*> free_;
};

std::vector<std::string> map_chromosomes(const DosageBlock& block, ChromosomeCodes codes,
                                         const std::vector<std::string>& paths) {
  std::vector<std::string> mapped(block.size());
  for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
    const VariantSite& site = block.sites[site_idx];
    if (codes == ChromosomeCodes::as_is) {
      mapped[site_idx] = site.chromosome;
      continue;
    }
    auto code = map_chromosome_ssf(site.chromosome);
    if (!code) {
      throw Error(ExitCode::genotype_input,
                  paths[site.file_index] + ", record " + std::to_string(site.record_number) + " (" +
                      site.chromosome + ":" + std::to_string(site.position) + ")",
                  "contig '" + site.chromosome + "' has no GWAS-SSF chromosome code (1-22, X, Y, MT)",
                  "scan only the main chromosomes, or write contig names unchanged with --chromosome-codes as-is");
    }
    mapped[site_idx] = *code;
  }
  return mapped;
}

// What the serial writer keeps up to date; saved at every checkpoint.
struct ScanProgress {
  std::vector<std::unique_ptr<BgzfTextFile>> files;
  CheckpointState state;
  // With --sets, per trait: the set results and the sets the stream is in.
  const VariantSets* sets = nullptr;
  std::vector<std::unique_ptr<BgzfTextFile>> set_files;
  std::vector<std::unique_ptr<SetAccumulator>> set_accumulators;
};

// The open sets go first, under their own name; the checkpoint then names
// their digest, so that a run stopped between the two saves is refused on
// --resume rather than continued with sets from another point.
void save_set_progress(const ScanOptions& options, const std::vector<TraitContext>& traits, ScanProgress& progress) {
  std::string bytes;
  for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
    progress.state.set_compressed_sizes[traits[trait_idx].set.trait] = progress.set_files[trait_idx]->checkpoint();
    progress.set_accumulators[trait_idx]->save(bytes);
  }
  progress.state.sets_state_digest = fingerprint_of({bytes});
  PlainTextFile file(sets_state_path(options.out_prefix));
  file.write(bytes);
  file.commit();
}

void save_progress(const ScanOptions& options, const std::vector<TraitContext>& traits, ScanProgress& progress) {
  for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
    progress.state.compressed_sizes[traits[trait_idx].set.trait] = progress.files[trait_idx]->checkpoint();
  }
  if (progress.sets) save_set_progress(options, traits, progress);
  save_checkpoint(checkpoint_path(options.out_prefix), progress.state);
}

void add_tally(const TraitTally& block, TraitTally& total) {
  total.written += block.written;
  total.monomorphic += block.monomorphic;
  total.in_covariate_span += block.in_covariate_span;
  total.confirmed += block.confirmed;
  total.discordant += block.discordant;
  total.confirm_not_converged += block.confirm_not_converged;
  total.firth += block.firth;
  for (int reason = 0; reason < qc_reason_count; ++reason) total.filtered[reason] += block.filtered[reason];
}

void write_ready_set_rows(SetAccumulator& accumulator, BgzfTextFile& file) {
  std::string rows;
  accumulator.take_rows(rows);
  if (!rows.empty()) file.write(rows);
}

void run_pipeline(const ScanOptions& options, GenotypeReader& reader,
                  const std::vector<TraitContext>& traits, ScanProgress& progress) {
  // Traits with the same kernel rows share one gathered block: the first of
  // them gathers it.
  std::vector<std::size_t> gatherer(traits.size());
  for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
    gatherer[trait_idx] = trait_idx;
    for (std::size_t earlier = 0; earlier < trait_idx; ++earlier) {
      if (traits[earlier].kernel_row_samples == traits[trait_idx].kernel_row_samples) {
        gatherer[trait_idx] = gatherer[earlier];
        break;
      }
    }
  }
  struct ThreadScratch {
    BlockTotals totals;
    std::vector<GatheredBlock> gathered;
    std::vector<TraitScratch> traits;
  };
  tbb::enumerable_thread_specific<ThreadScratch> scratch_per_thread(
      [&] { return ThreadScratch{BlockTotals{}, std::vector<GatheredBlock>(traits.size()), std::vector<TraitScratch>(traits.size())}; });
  const std::size_t tokens = static_cast<std::size_t>(options.threads) * 3;
  const std::vector<std::size_t> left_out_by_all = samples_left_out_by_all(traits);
  const std::size_t sample_count = reader.sample_ids().size();
  ProgressSettings progress_settings;
  progress_settings.mode = choose_progress_mode(options.quiet);
  progress_settings.total_records = reader.indexed_record_count();
  ProgressDisplay display(progress_settings);

  BlockPool pool;
  auto read_stage = [&](tbb::flow_control& control) -> BlockWork* {
    BlockWork* work = pool.take();
    if (reader.read_batch(work->batch, options.records_per_block) == 0) {
      pool.give_back(work);
      control.stop();
      return nullptr;
    }
    return work;
  };
  auto test_stage = [&](BlockWork* work) -> BlockWork* {
    // Inflating input ahead of the serial reader keeps it from holding up
    // the pipeline: it then only splits records.
    reader.inflate_ahead();
    work->block.clear();
    work->block.sample_count = sample_count;
    work->batch.decode(work->block);
    work->chromosomes = map_chromosomes(work->block, options.chromosome_codes, reader.paths());
    ThreadScratch& scratch = scratch_per_thread.local();
    total_block(work->block, options.haploid_dosage, left_out_by_all, scratch.totals);
    work->outputs.resize(traits.size());
    if (progress.sets) find_block_sets(*progress.sets, work->block, work->sets);
    for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
      GatheredBlock& gathered = scratch.gathered[gatherer[trait_idx]];
      if (gatherer[trait_idx] == trait_idx) gather_block(traits[trait_idx].kernel_row_samples, work->block, gathered);
      process_trait_block(traits[trait_idx], work->block, scratch.totals, gathered, work->chromosomes,
                          scratch.traits[trait_idx], work->outputs[trait_idx], progress.sets ? &work->sets : nullptr);
    }
    return work;
  };
  auto write_stage = [&](BlockWork* work) {
    CheckpointState& state = progress.state;
    state.records += work->batch.size();
    state.alleles += work->block.size();
    for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
      TraitBlockOutput& output = work->outputs[trait_idx];
      progress.files[trait_idx]->write_rows(output.rows);
      add_tally(output.tally, state.tallies[traits[trait_idx].set.trait]);
      for (const std::string& note : output.discordant_notes) current_log().detail(note);
      if (progress.sets && work->block.size() > 0) {
        SetAccumulator& accumulator = *progress.set_accumulators[trait_idx];
        accumulator.add_block(output.set_variants, work->sets.contig_keys.back(), work->block.sites.back().position);
        write_ready_set_rows(accumulator, *progress.set_files[trait_idx]);
      }
    }
    ++state.blocks;
    if (state.blocks % options.blocks_per_checkpoint == 0) save_progress(options, traits, progress);
    display.update(state.records);
    pool.give_back(work);
    if (options.after_block) options.after_block(state.blocks);
  };

  tbb::parallel_pipeline(
      tokens,
      tbb::make_filter<void, BlockWork*>(tbb::filter_mode::serial_in_order, read_stage) &
          tbb::make_filter<BlockWork*, BlockWork*>(tbb::filter_mode::parallel, test_stage) &
          tbb::make_filter<BlockWork*, void>(tbb::filter_mode::serial_in_order, write_stage));
  display.finish(progress.state.records);
}

// The checkpoint of an interrupted run with the same inputs and options, or
// nothing when there is none. Refuses one made by a different run.
std::optional<CheckpointState> find_resume_point(const ScanOptions& options,
                                                 const std::vector<std::string>& description) {
  const std::string path = checkpoint_path(options.out_prefix);
  std::optional<CheckpointState> saved = load_checkpoint(path);
  if (!saved) {
    current_log().line("note: --resume found no checkpoint " + path + "; starting from the beginning");
    return std::nullopt;
  }
  if (saved->run_description != description) {
    std::string differences;
    for (const std::string& line : describe_differences(saved->run_description, description)) {
      differences += "\n    " + line;
    }
    throw Error(ExitCode::usage, path,
                "--resume refused: the interrupted run used other inputs or options:" + differences,
                "resume with the original command, or run without --resume to start over");
  }
  return saved;
}

// Reads past the records that the interrupted run finished, in the same
// batches, so that every later block holds the records it held before.
void skip_finished_records(const ScanOptions& options, GenotypeReader& reader, const CheckpointState& saved) {
  RecordBatch batch;
  std::uint64_t records = 0;
  for (std::uint64_t block_idx = 0; block_idx < saved.blocks; ++block_idx) {
    records += reader.read_batch(batch, options.records_per_block);
  }
  if (records != saved.records) {
    throw Error(ExitCode::usage, checkpoint_path(options.out_prefix),
                "the genotype files hold fewer records than the checkpoint says were scanned",
                "run the scan again without --resume");
  }
  current_log().line("resuming after record " + std::to_string(records) + " (block " +
                     std::to_string(saved.blocks) + ")");
}

void open_result_files(const ScanOptions& options, const std::vector<TraitContext>& traits,
                       const std::optional<CheckpointState>& saved, ScanProgress& progress) {
  for (const TraitContext& trait : traits) {
    const std::string path = result_path(options.out_prefix, trait.set.trait);
    if (saved) {
      auto size = saved->compressed_sizes.find(trait.set.trait);
      if (size == saved->compressed_sizes.end()) {
        throw Error(ExitCode::usage, checkpoint_path(options.out_prefix),
                    "the checkpoint has no partial results for trait " + trait.set.trait,
                    "run the scan again without --resume");
      }
      progress.files.push_back(BgzfTextFile::resume(path, size->second));
    } else {
      progress.files.push_back(std::make_unique<BgzfTextFile>(path));
      progress.files.back()->write(result_header_line(trait.tests->extra_columns()));
    }
    progress.files.back()->keep_on_interrupt();
  }
}

std::string base_name(const std::string& path) {
  const auto slash = path.find_last_of('/');
  return slash == std::string::npos ? path : path.substr(slash + 1);
}

std::string describe_regions(const std::vector<GenomicRegion>& regions) {
  std::string text;
  for (const GenomicRegion& region : regions) {
    text += (text.empty() ? "" : ";") + region.contig + ":" + std::to_string(region.first) + "-" +
            std::to_string(region.last);
  }
  return text;
}

// What the sidecar records beyond the standard keys: the run's fingerprint
// always, and for a shard its place and ranges, which merge checks.
std::vector<std::pair<std::string, std::string>> provenance_entries(const ScanOptions& options,
                                                                    const std::vector<GenomicRegion>& regions) {
  std::vector<std::pair<std::string, std::string>> entries;
  entries.emplace_back(kFingerprintKey, fingerprint_of(describe_run(options, false)));
  std::string relatedness;
  for (const std::string& path : options.relatedness_paths) {
    relatedness += (relatedness.empty() ? "" : "; ") + base_name(path) + " md5 " + md5_hex_of_file(path);
  }
  if (!relatedness.empty()) entries.emplace_back(kRelatednessKey, relatedness);
  if (options.shard_count > 0) {
    entries.emplace_back(kShardKey, std::to_string(options.shard) + "/" + std::to_string(options.shard_count));
    entries.emplace_back(kShardRangesKey, describe_regions(regions));
  }
  return entries;
}

void write_sidecar(const ScanOptions& options, const TraitContext& trait, const std::string& path,
                   const std::vector<std::pair<std::string, std::string>>& provenance) {
  SidecarFields fields;
  fields.data_file_name = base_name(path);
  fields.genome_assembly = options.genome_assembly;
  fields.trait_description = trait.set.trait;
  fields.sample_size = trait.set.genotype_index.size();
  if (trait.set.kind == TraitKind::binary) {
    fields.case_count = trait.set.case_count;
    fields.control_count = trait.set.control_count;
  }
  fields.software_version = TAMIS_VERSION;
  fields.adjusted_covariates = options.covariates;
  fields.extra = provenance;
  if (!options.condition_on.empty()) {
    const std::string conditions = join(options.condition_on, ", ");
    for (const std::string& variant : options.condition_on) fields.adjusted_covariates.push_back(variant);
    fields.extra.emplace_back(kConditionedOnKey, conditions);
  }
  if (!trait.null_model_summary.empty()) fields.extra.emplace_back(kNullModelKey, trait.null_model_summary);
  write_metadata_sidecar(path, fields);
}

void log_tallies(const ScanSummary& summary, const std::vector<TraitContext>& traits) {
  RunLog& log = current_log();
  log.line("read " + std::to_string(summary.records) + " records, " + std::to_string(summary.alleles) +
           " tested alleles");
  if (summary.records == 0) log.line("note: the genotype files hold no records; results files have only the header");
  for (const TraitContext& trait : traits) {
    const TraitTally& tally = summary.tallies.at(trait.set.trait);
    std::ostringstream text;
    text << "trait " << trait.set.trait << ": " << tally.written << " written, " << tally.monomorphic
         << " monomorphic in the analysis samples, " << tally.in_covariate_span
         << " explained by the covariates, " << tally.confirmed << " confirmed, " << tally.discordant
         << " flagged for disagreeing tests";
    if (tally.firth) text << " (" << tally.firth << " by Firth's penalised likelihood)";
    if (tally.confirm_not_converged) text << ", " << tally.confirm_not_converged << " refits not converged";
    for (int reason = 0; reason < qc_reason_count; ++reason) {
      if (tally.filtered[reason]) text << ", " << tally.filtered[reason] << " below the " << kQcReasonNames[reason] << " floor";
    }
    log.line(text.str());
  }
}

VariantSets load_sets(const SetScanOptions& options, bool sharded) {
  SetFileOptions file_options;
  file_options.max_variants = options.max_variants;
  VariantSets sets = VariantSets::load(options.path, file_options);
  if (options.weighting == SetWeighting::listed && sets.format() == SetFileFormat::bed) {
    throw Error(ExitCode::usage, options.path, "--set-weights listed needs weights in the set file, and a BED file has none",
                "give a list file (set, variant, weight), or choose --set-weights beta or flat");
  }
  const SetFileSummary& summary = sets.summary();
  current_log().line("sets: " + std::to_string(summary.sets) + " from " + options.path + " (" +
                     std::to_string(summary.lines) + " lines); variants with minor allele frequency up to " +
                     format_number(options.maf_ceiling) + ", weights " + set_weighting_name(options.weighting) +
                     (options.collapse_mac > 0 ? ", minor allele counts up to " + format_number(options.collapse_mac) +
                                                     " summed into one variant per set"
                                               : std::string()));
  for (const std::string& warning : summary.warnings) current_log().line("warning: " + warning);
  if (sharded && has_id_only_entries(sets)) {
    current_log().line("warning: --shard with sets listed by ID: a shard sees only its own part of the genome, so a "
                       "set whose variants are named by ID only is tested with the variants of the shard where "
                       "they first appear; list them as chr:pos:ref:alt so that shards keep sets whole");
  }
  return sets;
}

[[noreturn]] void refuse_set_resume(const ScanOptions& options, const std::string& problem) {
  throw Error(ExitCode::usage, checkpoint_path(options.out_prefix), problem, "run the scan again without --resume");
}

std::string read_whole_file(const std::string& path) {
  std::ifstream input(path, std::ios::binary);
  std::ostringstream bytes;
  bytes << input.rdbuf();
  return bytes.str();
}

// On --resume, the set files continue from the checkpoint and the open sets
// come back as they were.
void open_set_files(const ScanOptions& options, const std::vector<TraitContext>& traits, const VariantSets& sets,
                    const std::optional<CheckpointState>& saved, ScanProgress& progress) {
  progress.sets = &sets;
  for (const TraitContext& trait : traits) {
    const std::string path = set_result_path(options.out_prefix, trait.set.trait);
    if (saved) {
      auto size = saved->set_compressed_sizes.find(trait.set.trait);
      if (size == saved->set_compressed_sizes.end()) {
        refuse_set_resume(options, "the checkpoint has no partial set results for trait " + trait.set.trait);
      }
      progress.set_files.push_back(BgzfTextFile::resume(path, size->second));
    } else {
      progress.set_files.push_back(std::make_unique<BgzfTextFile>(path));
      progress.set_files.back()->write(set_result_header_line());
    }
    progress.set_files.back()->keep_on_interrupt();
    progress.set_accumulators.push_back(std::make_unique<SetAccumulator>(sets, options.sets, trait));
  }
  if (!saved) return;
  const std::string state_path = sets_state_path(options.out_prefix);
  const std::string bytes = read_whole_file(state_path);
  if (fingerprint_of({bytes}) != saved->sets_state_digest) {
    refuse_set_resume(options, "the saved state of the open variant sets (" + state_path +
                                   ") does not belong to this checkpoint");
  }
  std::size_t offset = 0;
  for (auto& accumulator : progress.set_accumulators) accumulator->restore(bytes, offset, state_path);
}

void finish_set_tests(const std::vector<TraitContext>& traits, ScanProgress& progress) {
  for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
    progress.set_accumulators[trait_idx]->finish();
    write_ready_set_rows(*progress.set_accumulators[trait_idx], *progress.set_files[trait_idx]);
  }
}

void log_set_tallies(const VariantSets& sets, const SetScanOptions& options, const std::vector<TraitContext>& traits,
                     const ScanProgress& progress) {
  const std::size_t chosen = options.only_sets.empty() ? sets.size() : options.only_sets.size();
  for (std::size_t trait_idx = 0; trait_idx < traits.size(); ++trait_idx) {
    const SetTally& tally = progress.set_accumulators[trait_idx]->tally();
    const std::uint64_t empty = chosen - std::min<std::uint64_t>(chosen, tally.tested + tally.too_large);
    std::ostringstream text;
    text << "trait " << traits[trait_idx].set.trait << ": " << tally.tested << " sets tested, " << empty
         << " with no variant left after filtering";
    if (tally.variants_collapsed) text << ", " << tally.variants_collapsed << " ultra-rare variants collapsed";
    current_log().line(text.str());
    if (tally.too_large) {
      std::string names;
      for (const std::string& name : tally.too_large_names) names += (names.empty() ? "" : ", ") + name;
      current_log().line("warning: trait " + traits[trait_idx].set.trait + ": " + std::to_string(tally.too_large) +
                         " sets with more than " + std::to_string(progress.set_accumulators[trait_idx]->max_variants()) +
                         " variants skipped (" + names + (tally.too_large > tally.too_large_names.size() ? ", ..." : "") +
                         "); raise --set-max-variants to test them");
    }
    if (tally.split_across_chromosomes) {
      current_log().line("warning: trait " + traits[trait_idx].set.trait + ": " +
                         std::to_string(tally.split_across_chromosomes) +
                         " variants of sets already tested on another chromosome were left out; a set is tested on one chromosome");
    }
  }
}

}  // namespace

std::string result_path(const std::string& out_prefix, const std::string& trait) {
  return out_prefix + "." + trait + ".tsv.gz";
}

std::string set_result_path(const std::string& out_prefix, const std::string& trait) {
  return out_prefix + "." + trait + ".sets.tsv.gz";
}

// htslib's decompression threads beside the scan's own, for compressed VCF
// and reading through an index (a BCF read whole is inflated by the workers
// themselves). On a few cores they only compete with the workers (on 2 cores
// a BCF scan took 1.6 times as long with one of them); with many workers the
// serial reader would not keep pace without them.
int decompression_threads_for(int scan_threads) { return scan_threads >= 4 ? scan_threads / 4 : 0; }

GenotypeReaderOptions reader_options_for(const std::vector<std::string>& paths, DosageField field, int threads,
                                         const std::vector<GenomicRegion>& regions, int haploid_dosage) {
  GenotypeReaderOptions reader_options;
  reader_options.paths = paths;
  reader_options.field = field;
  reader_options.io_threads = decompression_threads_for(threads);
  reader_options.regions = regions;
  reader_options.haploid_dosage = haploid_dosage;
  return reader_options;
}

// Records per block when the options leave it open: few enough that a
// block's decoded dosages (and its sample-major copy) stay in a core's
// cache, while the kernel still gets a few register-wide groups of variants.
std::size_t records_per_block_for(std::size_t sample_count) {
  constexpr std::size_t kBlockBytes = std::size_t{1} << 20;
  const std::size_t fitting = kBlockBytes / (sizeof(double) * std::max<std::size_t>(sample_count, 1));
  return std::clamp<std::size_t>(fitting / 8 * 8, 8, 256);
}

ScanSummary run_scan(const ScanOptions& requested) {
  const auto start = std::chrono::steady_clock::now();
  ScanOptions options = requested;
  tbb::global_control thread_limit(tbb::global_control::max_allowed_parallelism,
                                   static_cast<std::size_t>(options.threads));
  GenotypeReaderOptions reader_options = reader_options_for(
      options.genotype_paths, options.dosage_field, options.threads, options.regions, options.haploid_dosage);
  std::optional<VariantSets> sets;
  if (options.sets.active()) sets = load_sets(options.sets, options.shard_count > 0);
  if (options.shard_count > 0) {
    ShardCutMover move_cut;
    if (sets) {
      move_cut = [&sets](const std::string& contig, std::int64_t first) { return cut_outside_sets(*sets, contig, first); };
    }
    reader_options.regions = plan_shard(options.genotype_paths, options.shard, options.shard_count, move_cut);
    current_log().line("shard " + std::to_string(options.shard) + "/" + std::to_string(options.shard_count) +
                       ": " + (reader_options.regions.empty() ? std::string("(no records)")
                                                              : describe_regions(reader_options.regions)));
  }
  if (options.selection.active()) {
    current_log().line("selected " + std::to_string(options.selection.size()) + " variants" + (options.regions.empty() ? " (reading the files whole)" : " (through the index)"));
  }
  GenotypeReader reader(reader_options);
  if (options.records_per_block == 0) options.records_per_block = records_per_block_for(reader.sample_ids().size());
  const auto provenance = provenance_entries(options, reader_options.regions);
  current_log().detail("run fingerprint: " + provenance.front().second);
  const TraitTable table = TraitTable::load(options.traits_path, options.table);
  log_inputs(options, reader, table);
  std::optional<ScanRelatedness> relatedness;
  if (!options.relatedness_paths.empty()) {
    relatedness = load_scan_relatedness(options.relatedness_paths, reader.sample_ids());
  }
  const std::vector<ConditionVariant> conditions = read_condition_variants(options);
  log_conditions(conditions);
  const std::vector<TraitContext> traits =
      prepare_traits(options, table, reader.sample_ids(), relatedness ? &*relatedness : nullptr, conditions);

  ScanProgress progress;
  progress.state.run_description = describe_run(options, true);
  std::optional<CheckpointState> saved;
  if (options.resume) saved = find_resume_point(options, progress.state.run_description);
  if (saved) {
    skip_finished_records(options, reader, *saved);
    progress.state = *saved;
  }
  for (const TraitContext& trait : traits) progress.state.tallies[trait.set.trait];
  open_result_files(options, traits, saved, progress);
  if (sets) open_set_files(options, traits, *sets, saved, progress);
  run_pipeline(options, reader, traits, progress);
  if (sets) finish_set_tests(traits, progress);

  // The checkpoint goes before any file takes its final name: a run stopped
  // while committing then starts over on --resume instead of finding some
  // traits' results already renamed.
  std::remove(checkpoint_path(options.out_prefix).c_str());
  if (sets) std::remove(sets_state_path(options.out_prefix).c_str());
  ScanSummary summary;
  summary.records = progress.state.records;
  summary.alleles = progress.state.alleles;
  summary.tallies = progress.state.tallies;
  // Each trait's file is finished on its own thread: saving a tabix index
  // deflates it, some 20 ms for 20,000 rows.
  tbb::parallel_for(std::size_t{0}, traits.size(), [&](std::size_t trait_idx) {
    progress.files[trait_idx]->commit(IndexKind::tabix_results);
    write_sidecar(options, traits[trait_idx], progress.files[trait_idx]->final_path(), provenance);
    if (sets) progress.set_files[trait_idx]->commit(IndexKind::tabix_sets);
  });
  for (const auto& file : progress.files) summary.result_files.push_back(file->final_path());
  for (const auto& file : progress.set_files) summary.set_files.push_back(file->final_path());
  log_tallies(summary, traits);
  if (sets) log_set_tallies(*sets, options.sets, traits, progress);
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  current_log().line("wall time: " + format_number(std::round(seconds * 100) / 100) + " s");
  return summary;
}

}  // namespace tamis
