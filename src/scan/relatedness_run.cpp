// The `tamis relatedness` pipeline: read records serially, decode them and
// take each marker's QC in parallel, pass the markers kept (in file order,
// thinned by distance) in blocks to the accumulator, whose tile products run
// in parallel, then write this share's entries.
#include "tamis/relatedness_run.hpp"

#include <tbb/global_control.h>
#include <sys/stat.h>
#include <tbb/parallel_pipeline.h>

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstring>
#include <memory>
#include <new>
#include <sstream>

#include "scan/block_sizing.hpp"
#include "scan/checkpoint.hpp"
#include "scan/progress.hpp"
#include "scan/sample_lists.hpp"
#include "tamis/errors.hpp"
#include "tamis/hardy_weinberg.hpp"
#include "tamis/relatedness.hpp"
#include "tamis/relatedness_file.hpp"
#include "tamis/results_writer.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

std::string number_text(double value) {
  char text[40];
  std::snprintf(text, sizeof text, "%.9g", value);
  return text;
}

std::string base_name_of(const std::string& path) {
  const std::size_t slash = path.find_last_of('/');
  return slash == std::string::npos ? path : path.substr(slash + 1);
}

std::string part_text(int part, int part_count) { return std::to_string(part) + "/" + std::to_string(part_count); }

// The genotype samples that enter the matrix, in file order.
std::vector<std::size_t> taken_samples(const RelatednessOptions& options, const std::vector<std::string>& samples) {
  const std::vector<bool> excluded = excluded_samples(options.keep_samples_path, options.drop_samples_path, samples);
  std::vector<std::size_t> taken;
  for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) {
    if (excluded.empty() || !excluded[sample_idx]) taken.push_back(sample_idx);
  }
  if (taken.empty()) {
    throw Error(ExitCode::usage, options.keep_samples_path.empty() ? "--drop-samples" : "--keep-samples",
                "no genotype sample is left for the matrix", "check that the lists name the genotype files' samples");
  }
  return taken;
}

// The first QC floor a marker fails over the taken samples (the scan's
// floors, in the scan's order), or qc_reason_count when it passes them all.
// `column` holds its dosages over those samples (genotype samples
// `samples`); p is the mean dosage / 2, as in the matrix itself.
int failed_floor(const QcFloors& floors, const VariantSite& site, const double* column,
                 const std::int8_t* diploid_calls, const std::vector<std::size_t>& samples) {
  const std::size_t taken = samples.size();
  std::size_t called = 0;
  double sum = 0.0, squares = 0.0;
  for (std::size_t row = 0; row < taken; ++row) {
    if (std::isnan(column[row])) continue;
    ++called;
    sum += column[row];
    squares += column[row] * column[row];
  }
  const double frequency = called ? sum / (2.0 * static_cast<double>(called)) : 0.0;
  if (std::min(frequency, 1.0 - frequency) < floors.minor_allele_frequency) return qc_maf;
  if (std::min(sum, 2.0 * static_cast<double>(called) - sum) < floors.minor_allele_count) return qc_mac;
  if (floors.info > 0.0 && (site.source == DosageField::ds || site.source == DosageField::gp)) {
    const double mean = called ? sum / static_cast<double>(called) : 0.0;
    const double variance = called ? std::max(0.0, squares / static_cast<double>(called) - mean * mean) : 0.0;
    const double expected = 2.0 * frequency * (1.0 - frequency);
    if (expected > 0.0 && variance / expected < floors.info) return qc_info;
  }
  if (static_cast<double>(called) < floors.call_rate * static_cast<double>(taken)) return qc_call_rate;
  if (floors.hwe_p > 0.0 && site.has_hard_calls) {
    std::uint64_t genotype_counts[3] = {0, 0, 0};
    for (std::size_t sample : samples) {
      const std::int8_t call = diploid_calls[sample];
      if (call >= 0) ++genotype_counts[call];
    }
    if (hardy_weinberg_exact_log_p(genotype_counts[0], genotype_counts[1], genotype_counts[2]) < std::log(floors.hwe_p)) {
      return qc_hwe;
    }
  }
  return qc_reason_count;
}

// One batch of records in flight, with the markers of it that pass the floors.
struct MarkerBatch {
  RecordBatch batch;
  DosageBlock block;
  std::vector<double> columns;            // passing markers' dosages over the taken samples, marker-major
  std::vector<std::size_t> passing_sites;  // their sites in `block`
  MarkerTally tally;
};

std::string variant_key(const VariantSite& site) {
  const std::optional<std::string> code = map_chromosome_ssf(site.chromosome);
  return (code ? *code : site.chromosome) + "_" + std::to_string(site.position) + "_" + site.ref + "_" + site.alt;
}

void select_markers(const RelatednessOptions& options, const std::vector<std::size_t>& samples, MarkerBatch& work) {
  const std::size_t taken = samples.size();
  work.columns.clear();
  work.passing_sites.clear();
  work.tally = MarkerTally{};
  work.tally.records = work.batch.size();
  for (std::size_t site_idx = 0; site_idx < work.block.size(); ++site_idx) {
    const VariantSite& site = work.block.sites[site_idx];
    ++work.tally.alleles;
    if (site.alt_count != 1) {
      ++work.tally.multiallelic;
      continue;
    }
    if (options.selection.active() && !options.selection.takes("", site.id, variant_key(site))) {
      ++work.tally.not_selected;
      continue;
    }
    const double* dosages = work.block.site_dosages(site_idx);
    const std::size_t start = work.columns.size();
    work.columns.resize(start + taken);
    double* column = work.columns.data() + start;
    for (std::size_t row = 0; row < taken; ++row) column[row] = dosages[samples[row]];
    const int floor = failed_floor(options.floors, site, column,
                                   site.has_hard_calls ? work.block.site_diploid_calls(site_idx) : nullptr, samples);
    if (floor != qc_reason_count) {
      ++work.tally.filtered[floor];
      work.columns.resize(start);
      continue;
    }
    work.passing_sites.push_back(site_idx);
  }
}

void add_tally(const MarkerTally& batch, MarkerTally& total) {
  total.records += batch.records;
  total.alleles += batch.alleles;
  total.multiallelic += batch.multiallelic;
  total.not_selected += batch.not_selected;
  for (int reason = 0; reason < qc_reason_count; ++reason) total.filtered[reason] += batch.filtered[reason];
}

// Markers kept in file order: a marker closer than the thinning distance to
// the last one kept on its contig is passed over. Kept markers gather into
// blocks of a fixed width, whatever the threads, so the sums are always
// taken in the same blocks.
class MarkerStream {
 public:
  MarkerStream(GrmAccumulator& accumulator, std::size_t width, double thin_kb)
      : accumulator_(accumulator),
        width_(width),
        thin_bases_(static_cast<std::int64_t>(std::llround(thin_kb * 1000.0))),
        buffer_(width * accumulator.sample_count()) {}

  void take(const MarkerBatch& work, MarkerTally& tally, std::vector<std::string>& used_keys) {
    const std::size_t taken = accumulator_.sample_count();
    for (std::size_t kept_idx = 0; kept_idx < work.passing_sites.size(); ++kept_idx) {
      const VariantSite& site = work.block.sites[work.passing_sites[kept_idx]];
      if (thin_bases_ > 0 && site.chromosome == last_contig_ && site.position - last_position_ < thin_bases_) {
        ++tally.thinned;
        continue;
      }
      last_contig_ = site.chromosome;
      last_position_ = site.position;
      ++tally.used;
      used_keys.push_back(site.chromosome + ":" + std::to_string(site.position) + ":" + site.ref + ":" + site.alt);
      std::memcpy(buffer_.data() + filled_ * taken, work.columns.data() + kept_idx * taken, taken * sizeof(double));
      if (++filled_ == width_) flush();
    }
  }

  void flush() {
    accumulator_.add_markers(buffer_.data(), filled_);
    filled_ = 0;
  }

 private:
  GrmAccumulator& accumulator_;
  std::size_t width_;
  std::int64_t thin_bases_;
  std::vector<double> buffer_;
  std::size_t filled_ = 0;
  std::string last_contig_;
  std::int64_t last_position_ = 0;
};

void stream_markers(const RelatednessOptions& options, GenotypeReader& reader, const std::vector<std::size_t>& samples,
                    GrmAccumulator& accumulator, MarkerTally& tally, std::vector<std::string>& used_keys) {
  const std::size_t genotype_samples = reader.sample_ids().size();
  const std::size_t records_per_batch = records_per_block_for(genotype_samples);
  MarkerStream stream(accumulator, GrmAccumulator::preferred_block_width(samples.size()), options.thin_kb);
  // The pipeline holds at most `tokens` batches, which leave it in order, so
  // batch i + tokens reuses batch i's buffers.
  const std::size_t tokens = static_cast<std::size_t>(options.threads) * 2;
  std::vector<MarkerBatch> batches(tokens);
  std::size_t next_batch = 0;
  ProgressSettings progress;
  progress.mode = choose_progress_mode(options.quiet);
  progress.total_records = reader.indexed_record_count();
  ProgressDisplay display(progress);
  tbb::parallel_pipeline(
      tokens,
      tbb::make_filter<void, MarkerBatch*>(tbb::filter_mode::serial_in_order,
                                           [&](tbb::flow_control& control) -> MarkerBatch* {
                                             MarkerBatch* work = &batches[next_batch++ % tokens];
                                             if (reader.read_batch(work->batch, records_per_batch) == 0) {
                                               control.stop();
                                               return nullptr;
                                             }
                                             return work;
                                           }) &
          tbb::make_filter<MarkerBatch*, MarkerBatch*>(tbb::filter_mode::parallel,
                                                       [&](MarkerBatch* work) {
                                                         reader.inflate_ahead();
                                                         work->block.clear();
                                                         work->block.sample_count = genotype_samples;
                                                         work->batch.decode(work->block);
                                                         select_markers(options, samples, *work);
                                                         return work;
                                                       }) &
          tbb::make_filter<MarkerBatch*, void>(tbb::filter_mode::serial_in_order, [&](MarkerBatch* work) {
            add_tally(work->tally, tally);
            stream.take(*work, tally, used_keys);
            display.update(tally.records);
          }));
  stream.flush();
  display.finish(tally.records);
}

// What the parts of one matrix share: the inputs as they went in (the
// samples and the markers used, the files by name and size, not by time, so
// that a part computed from a copy on another node still matches) and every
// option that changes an entry, but not K of --part K/N.
std::string fingerprint_run(const RelatednessOptions& options, const GenotypeReader& reader,
                            const std::vector<std::string>& sample_ids, const std::vector<std::string>& used_keys,
                            std::size_t tile_size) {
  std::vector<std::string> lines;
  lines.push_back(std::string("version=") + TAMIS_VERSION);
  for (std::size_t file_idx = 0; file_idx < reader.paths().size(); ++file_idx) {
    const std::string& path = reader.paths()[file_idx];
    struct stat info;
    const long long size = stat(path.c_str(), &info) == 0 ? static_cast<long long>(info.st_size) : -1;
    lines.push_back("genotypes=" + base_name_of(path) + " size " + std::to_string(size) + " dosage from " +
                    dosage_field_name(reader.resolved_field(file_idx)));
  }
  lines.push_back("haploid_dosage=" + std::to_string(options.haploid_dosage));
  lines.push_back("samples=" + std::to_string(sample_ids.size()) + " " + fingerprint_of(sample_ids));
  lines.push_back("markers=" + std::to_string(used_keys.size()) + " " + fingerprint_of(used_keys));
  lines.push_back("keep_above=" + number_text(options.keep_above));
  lines.push_back("parts=" + std::to_string(options.part_count) + " tiles of " + std::to_string(tile_size));
  lines.push_back("block_width=" + std::to_string(GrmAccumulator::preferred_block_width(sample_ids.size())));
  return fingerprint_of(lines);
}

GrmAccumulator make_accumulator(const RelatednessOptions& options, std::size_t samples, std::size_t tile_size) {
  const TileShare share = plan_tile_share(samples, tile_size, options.part, options.part_count);
  const double pairs = static_cast<double>(share.end_tile - share.first_tile) * static_cast<double>(tile_size * tile_size);
  const double gigabytes = pairs * (sizeof(double) + sizeof(std::uint32_t)) / 1e9;
  current_log().line("part " + part_text(options.part, options.part_count) + ": " +
                     std::to_string(share.end_tile - share.first_tile) + " of " +
                     std::to_string(share.tile_rows * (share.tile_rows + 1) / 2) + " tiles of " +
                     std::to_string(tile_size) + " x " + std::to_string(tile_size) + " sample pairs, up to " +
                     number_text(std::ceil(gigabytes * 100) / 100) + " GB");
  try {
    GrmAccumulator accumulator(samples, options.part, options.part_count, tile_size);
    const auto [first, end] = accumulator.diagonal_samples();
    current_log().detail(first == end ? "the part holds no diagonal rows"
                                      : "the part holds the diagonal rows of samples " + std::to_string(first + 1) +
                                            " to " + std::to_string(end) + " (in the matrix's order)");
    return accumulator;
  } catch (const std::bad_alloc&) {
    throw Error(ExitCode::usage, "--part " + part_text(options.part, options.part_count),
                "the share's tiles of sample pairs (about " + number_text(gigabytes) +
                    " GB) do not fit in this machine's memory",
                "split the matrix into more parts with --part K/N (each part needs about 1/N of it)");
  }
}

void log_inputs(const RelatednessOptions& options, const GenotypeReader& reader, std::size_t taken) {
  RunLog& log = current_log();
  log.detail("command: " + options.command_line);
  log.detail(std::string("version: tamis ") + TAMIS_VERSION);
  for (std::size_t file_idx = 0; file_idx < reader.paths().size(); ++file_idx) {
    log.detail("genotypes: " + reader.paths()[file_idx] + " (dosage from " +
               dosage_field_name(reader.resolved_field(file_idx)) + ")");
  }
  const std::size_t total = reader.sample_ids().size();
  log.line("samples: " + std::to_string(total) + " in the genotype files, " + std::to_string(taken) +
           " in the matrix" +
           (taken < total ? " (" + std::to_string(total - taken) + " left out by --keep-samples/--drop-samples)" : ""));
  const QcFloors& floors = options.floors;
  log.line("markers: biallelic variants with minor allele frequency >= " + number_text(floors.minor_allele_frequency) +
           ", minor allele count >= " + number_text(floors.minor_allele_count) + ", info >= " +
           number_text(floors.info) + ", call rate >= " + number_text(floors.call_rate) +
           ", Hardy-Weinberg p >= " + number_text(floors.hwe_p) +
           (options.thin_kb > 0 ? ", at least " + number_text(options.thin_kb) + " kb apart" : std::string()));
}

void log_markers(const MarkerTally& tally) {
  std::ostringstream text;
  text << "read " << tally.records << " records, " << tally.alleles << " alleles: " << tally.used
       << " markers used";
  if (tally.multiallelic) text << ", " << tally.multiallelic << " alleles of multiallelic records left out";
  if (tally.not_selected) text << ", " << tally.not_selected << " not in --variants";
  for (int reason = 0; reason < qc_reason_count; ++reason) {
    if (tally.filtered[reason]) text << ", " << tally.filtered[reason] << " below the " << kQcReasonNames[reason] << " floor";
  }
  if (tally.thinned) text << ", " << tally.thinned << " thinned out by distance";
  current_log().line(text.str());
}

// Samples without a single called marker have no diagonal, and no pair.
void check_every_sample_has_markers(const GrmAccumulator& accumulator, const std::vector<std::size_t>& samples,
                                    const GenotypeReader& reader) {
  if (accumulator.marker_count() == 0) {
    throw Error(ExitCode::genotype_input, "",
                "no marker is left for the matrix (see the counts above in the log)",
                "lower --maf-floor or --call-rate-floor, widen --region or --variants, or give files with "
                "biallelic variants");
  }
  const std::vector<std::uint64_t> called = accumulator.called_markers();
  std::vector<std::string> without;
  for (std::size_t row = 0; row < called.size(); ++row) {
    if (called[row] == 0) without.push_back(reader.sample_ids()[samples[row]]);
  }
  if (without.empty()) return;
  std::string shown;
  for (std::size_t id_idx = 0; id_idx < without.size() && id_idx < 5; ++id_idx) shown += (id_idx ? ", " : "") + without[id_idx];
  throw Error(ExitCode::genotype_input, "",
              std::to_string(without.size()) + " sample(s) have no call at any of the " +
                  std::to_string(accumulator.marker_count()) + " markers (" + shown +
                  (without.size() > 5 ? ", ..." : "") + ")",
              "leave them out with --drop-samples");
}

// Rows written, by kind, for the log.
struct RowTally {
  std::uint64_t diagonal = 0;
  std::uint64_t by_degree[5] = {0, 0, 0, 0, 0};

  void add(const RelatednessEntry& entry) {
    if (entry.first == entry.second) {
      ++diagonal;
    } else {
      ++by_degree[static_cast<int>(degree_of(entry.relatedness))];
    }
  }
};

// Streams this share's entries into the file: they are never all in memory.
std::uint64_t write_entries(const GrmAccumulator& accumulator, const std::vector<std::string>& sample_ids,
                            const std::string& path, double keep_above, RowTally& tally) {
  RelatednessFileWriter writer(path, sample_ids);
  accumulator.visit_entries(keep_above, [&](const RelatednessEntry& entry) {
    writer.add(entry);
    tally.add(entry);
  });
  writer.commit();
  return writer.rows();
}

void log_rows(const RowTally& tally, std::uint64_t rows, double keep_above) {
  std::ostringstream text;
  text << "rows: " << tally.diagonal << " diagonal, " << rows - tally.diagonal << " pairs with relatedness >= "
       << number_text(keep_above) << " (";
  const RelationshipDegree degrees[] = {RelationshipDegree::duplicate, RelationshipDegree::first,
                                        RelationshipDegree::second, RelationshipDegree::third,
                                        RelationshipDegree::unrelated};
  for (RelationshipDegree degree : degrees) {
    text << (degree == RelationshipDegree::duplicate ? "" : ", ") << tally.by_degree[static_cast<int>(degree)] << " "
         << degree_label(degree);
  }
  text << ")";
  current_log().line(text.str());
}

}  // namespace

std::string relatedness_log_path(const std::string& out_prefix, int part, int part_count) {
  if (part_count <= 1) return out_prefix + ".log";
  return out_prefix + ".part" + std::to_string(part) + "-of-" + std::to_string(part_count) + ".log";
}

RelatednessSummary run_relatedness(const RelatednessOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  tbb::global_control thread_limit(tbb::global_control::max_allowed_parallelism,
                                   static_cast<std::size_t>(options.threads));
  GenotypeReaderOptions reader_options = reader_options_for(
      options.genotype_paths, options.dosage_field, options.threads, options.regions, options.haploid_dosage);
  GenotypeReader reader(reader_options);
  const std::vector<std::size_t> samples = taken_samples(options, reader.sample_ids());
  log_inputs(options, reader, samples.size());
  const std::size_t tile_size = options.tile_size ? options.tile_size : GrmAccumulator::kDefaultTileSize;
  GrmAccumulator accumulator = make_accumulator(options, samples.size(), tile_size);

  RelatednessSummary summary;
  std::vector<std::string> used_keys;
  stream_markers(options, reader, samples, accumulator, summary.tally, used_keys);
  log_markers(summary.tally);
  if (accumulator.marker_count() < summary.tally.used) {
    current_log().line("note: " + std::to_string(summary.tally.used - accumulator.marker_count()) +
                       " of the markers used do not vary in the samples and add nothing");
  }
  check_every_sample_has_markers(accumulator, samples, reader);

  std::vector<std::string> sample_ids;
  for (std::size_t sample : samples) sample_ids.push_back(reader.sample_ids()[sample]);
  summary.data_path = relatedness_file_path(options.out_prefix, options.part, options.part_count);
  RowTally rows;
  summary.rows = write_entries(accumulator, sample_ids, summary.data_path, options.keep_above, rows);
  log_rows(rows, summary.rows, options.keep_above);
  RelatednessProvenance provenance;
  provenance.sample_count = samples.size();
  provenance.marker_count = accumulator.marker_count();
  provenance.part = options.part;
  provenance.part_count = options.part_count;
  provenance.keep_above = options.keep_above;
  provenance.fingerprint = fingerprint_run(options, reader, sample_ids, used_keys, tile_size);
  current_log().detail("run fingerprint: " + provenance.fingerprint);
  write_relatedness_sidecar(summary.data_path, provenance);

  summary.sample_count = samples.size();
  summary.marker_count = accumulator.marker_count();
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  current_log().line("wall time: " + number_text(std::round(seconds * 100) / 100) + " s");
  return summary;
}

}  // namespace tamis
