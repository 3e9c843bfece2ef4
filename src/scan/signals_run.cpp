// `tamis signals`: the loci to follow up, each window's dosages read through
// the index, stepwise selection per trait (scan/signal_selection.cpp), and
// the signals and credible files.
#include "tamis/signals.hpp"

#include <tbb/global_control.h>
#include <tbb/parallel_for.h>

#include <chrono>
#include <cmath>
#include <fstream>
#include <optional>

#include "scan/conditioning.hpp"
#include "scan/related_samples.hpp"
#include "scan/sample_lists.hpp"
#include "scan/signal_selection.hpp"
#include "scan/trait_setup.hpp"
#include "scan/variant_keys.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

// One locus to follow up: a row of the loci file (with its trait and lead),
// or a --region (every trait, no lead).
struct Locus {
  std::string name;
  std::string trait;  // empty: every trait
  std::vector<GenomicRegion> window;  // the same stretch under each contig name it may have
  std::string lead_variant_id;        // empty: the window's strongest variant leads
};

std::vector<std::string> split_tabs(const std::string& line) {
  std::vector<std::string> fields;
  std::size_t start = 0;
  while (true) {
    const std::size_t tab = line.find('\t', start);
    fields.push_back(line.substr(start, tab == std::string::npos ? std::string::npos : tab - start));
    if (tab == std::string::npos) return fields;
    start = tab + 1;
  }
}

std::int64_t parse_position(const std::string& text, const std::string& where, const std::string& column) {
  char* end = nullptr;
  const long long value = std::strtoll(text.c_str(), &end, 10);
  if (text.empty() || *end != '\0' || value < 1) {
    throw Error(ExitCode::results_input, where, "column " + column + " holds '" + text + "', not a position",
                "give the loci file that `tamis report` wrote, unedited");
  }
  return value;
}

std::vector<Locus> read_loci_file(const std::string& path, std::int64_t radius) {
  std::ifstream input(path);
  if (!input) throw Error(ExitCode::results_input, path, "cannot read the loci file", "check the path given to --loci");
  std::string line;
  if (!std::getline(input, line)) throw Error(ExitCode::results_input, path, "the loci file is empty", "");
  const std::vector<std::string> header = split_tabs(line);
  auto column = [&](const std::string& name, bool required) -> std::optional<std::size_t> {
    for (std::size_t column_idx = 0; column_idx < header.size(); ++column_idx) {
      if (header[column_idx] == name) return column_idx;
    }
    if (required) {
      throw Error(ExitCode::results_input, path + ", line 1", "the header has no column '" + name + "'",
                  "give the loci file (PREFIX.loci.tsv) that `tamis report` wrote");
    }
    return std::nullopt;
  };
  const std::size_t trait = *column("trait", true), chromosome = *column("chromosome", true);
  const std::size_t position = *column("lead_position", true), lead = *column("lead_variant_id", true);
  const std::optional<std::size_t> span_start = column("span_start", false), span_end = column("span_end", false);
  std::vector<Locus> loci;
  std::size_t line_number = 1;
  while (std::getline(input, line)) {
    ++line_number;
    if (!line.empty() && line.back() == '\r') line.pop_back();
    if (line.empty()) continue;
    const std::vector<std::string> fields = split_tabs(line);
    const std::string where = path + ", line " + std::to_string(line_number);
    if (fields.size() != header.size()) {
      throw Error(ExitCode::results_input, where,
                  std::to_string(fields.size()) + " fields where the header has " + std::to_string(header.size()),
                  "give the loci file that `tamis report` wrote, unedited");
    }
    const std::int64_t centre = parse_position(fields[position], where, "lead_position");
    std::int64_t first = std::max<std::int64_t>(1, centre - radius), last = centre + radius;
    if (span_start) first = std::min(first, parse_position(fields[*span_start], where, "span_start"));
    if (span_end) last = std::max(last, parse_position(fields[*span_end], where, "span_end"));
    Locus locus;
    locus.name = fields[lead];
    locus.trait = fields[trait];
    locus.lead_variant_id = fields[lead];
    for (const std::string& contig : contig_candidates(fields[chromosome])) locus.window.push_back({contig, first, last});
    loci.push_back(std::move(locus));
  }
  return loci;
}

std::vector<Locus> loci_of(const SignalOptions& options) {
  if (!options.loci_path.empty()) return read_loci_file(options.loci_path, options.window_radius);
  std::vector<Locus> loci;
  for (const std::string& text : options.region_texts) loci.push_back({text, "", {parse_region(text)}, ""});
  return loci;
}

// A window's records as read, over every genotype sample.
struct WindowRecords {
  DosageBlock block;
  std::vector<std::string> variant_ids;  // chromosome_position_ref_alt, as the results files write them
  std::vector<std::string> chromosomes;  // as written
};

std::string written_chromosome(const ScanOptions& options, const std::string& contig) {
  if (options.chromosome_codes == ChromosomeCodes::as_is) return contig;
  const std::optional<std::string> code = map_chromosome_ssf(contig);
  return code ? *code : contig;
}

WindowRecords read_window(const ScanOptions& options, const Locus& locus) {
  GenotypeReaderOptions reader_options;
  reader_options.paths = options.genotype_paths;
  reader_options.field = options.dosage_field;
  reader_options.haploid_dosage = options.haploid_dosage;
  reader_options.regions = locus.window;
  GenotypeReader reader(reader_options);
  WindowRecords records;
  records.block.sample_count = reader.sample_ids().size();
  RecordBatch batch;
  while (reader.read_batch(batch, 256) > 0) batch.decode(records.block);
  for (const VariantSite& site : records.block.sites) {
    records.chromosomes.push_back(written_chromosome(options, site.chromosome));
    records.variant_ids.push_back(records.chromosomes.back() + "_" + std::to_string(site.position) + "_" + site.ref +
                                  "_" + site.alt);
  }
  return records;
}

// The window over one trait's analysis samples: the sites that vary there,
// missing dosages imputed with the mean (as the scan imputes them).
struct TraitWindow {
  WindowVariants variants;
  std::vector<std::size_t> sites;  // the record site of each variant
};

// The scan's floors of minor allele frequency, minor allele count and call
// rate, taken from the dosages (the info and Hardy-Weinberg floors are
// refused by the command line).
bool passes_floors(const AnalysisDosages& column, std::size_t sample_count, const QcFloors& floors) {
  const double alt_frequency = column.sum / (2.0 * column.called);
  const double minor_frequency = std::fmin(alt_frequency, 1.0 - alt_frequency);
  const double minor_count = std::fmin(column.sum, 2.0 * column.called - column.sum);
  return minor_frequency >= floors.minor_allele_frequency && minor_count >= floors.minor_allele_count &&
         column.called / static_cast<double>(sample_count) >= floors.call_rate;
}

TraitWindow window_for_trait(const WindowRecords& records, const AnalysisSet& set, const QcFloors& floors) {
  TraitWindow window;
  std::vector<Eigen::VectorXd> columns;
  for (std::size_t site_idx = 0; site_idx < records.block.size(); ++site_idx) {
    std::optional<AnalysisDosages> column = dosages_over_samples(records.block.site_dosages(site_idx), set.genotype_index);
    // Monomorphic here, or below a floor: not tested, as in the scan.
    if (!column || !passes_floors(*column, set.genotype_index.size(), floors)) continue;
    window.sites.push_back(site_idx);
    window.variants.minor_allele_counts.push_back(std::fmin(column->sum, 2.0 * column->called - column->sum));
    columns.push_back(std::move(column->values));
  }
  window.variants.dosages.resize(static_cast<Eigen::Index>(set.genotype_index.size()),
                                 static_cast<Eigen::Index>(columns.size()));
  for (std::size_t variant = 0; variant < columns.size(); ++variant) {
    window.variants.dosages.col(static_cast<Eigen::Index>(variant)) = columns[variant];
  }
  return window;
}

// What every locus of one trait shares.
struct TraitFollowUp {
  const ScanOptions* options = nullptr;
  const std::vector<std::string>* samples = nullptr;
  const ScanRelatedness* relatedness = nullptr;
  AnalysisSet set;  // with --condition-on's columns
  SelectionSettings settings;
};

std::string number_text(double value) {
  if (!std::isfinite(value)) return "#NA";
  char text[64];
  std::snprintf(text, sizeof text, "%.9g", value);
  return text;
}

std::string refit_name(const Confirmation& refit) {
  if (refit.keeps_score) return "score";
  return refit.by_firth ? "firth" : "standard";
}

struct LocusRows {
  std::string signals;
  std::string credible;
  std::string log_line;
  std::size_t signal_count = 0;
};

void append_signal_row(const Locus& locus, const WindowRecords& records, const TraitWindow& window,
                       const SignalFit& signal, std::size_t order, std::string& out) {
  const std::size_t site_idx = window.sites[signal.variant];
  const VariantSite& site = records.block.sites[site_idx];
  const ConfirmResult& joint = signal.joint.result;
  const ScoreResult& conditional = signal.conditional[signal.variant];
  const bool refitted = !signal.joint.keeps_score && joint.converged;
  out += records.variant_ids[site_idx] + '\t' + locus.name + '\t' + records.chromosomes[site_idx] + '\t' +
         std::to_string(site.position) + '\t' + records.variant_ids[site_idx] + '\t' + site.alt + '\t' + site.ref;
  out += '\t' + (refitted ? number_text(joint.beta) : "#NA") + '\t' + (refitted ? number_text(joint.se) : "#NA");
  out += '\t' + (refitted ? format_p_value(joint.wald_log_p) : "#NA") + '\t' +
         (refitted ? format_p_value(joint.lrt_log_p) : "#NA");
  out += '\t' + number_text(conditional.beta) + '\t' + number_text(conditional.se) + '\t' +
         format_p_value(conditional.log_p);
  out += '\t' + std::to_string(signal.credible.size_95) + '\t' + std::to_string(signal.credible.size_99);
  out += '\t' + std::to_string(order) + '\t' + format_p_value(signal.selection_log_p) + '\t' + refit_name(signal.joint) +
         '\t' + std::to_string(window.variants.size()) + '\n';
}

void append_credible_rows(const WindowRecords& records, const TraitWindow& window, const SignalFit& signal,
                          std::string& out) {
  const std::string& signal_id = records.variant_ids[window.sites[signal.variant]];
  for (std::size_t variant = 0; variant < window.variants.size(); ++variant) {
    const std::size_t site_idx = window.sites[variant];
    const CredibleMember& member = signal.credible.members[variant];
    const ScoreResult& score = signal.conditional[variant];
    out += signal_id + '\t' + records.chromosomes[site_idx] + '\t' +
           std::to_string(records.block.sites[site_idx].position) + '\t' + records.variant_ids[site_idx] + '\t' +
           number_text(member.pip) + '\t' + (member.in_95 ? "1" : "0") + '\t' + (member.in_99 ? "1" : "0") + '\t' +
           number_text(member.log10_bayes_factor) + '\t';
    out += score.testable ? number_text(score.beta) + '\t' + number_text(score.se) + '\t' + format_p_value(score.log_p)
                          : std::string("#NA\t#NA\t#NA");
    out += '\n';
  }
}

std::optional<std::size_t> lead_in_window(const Locus& locus, const WindowRecords& records, const TraitWindow& window) {
  if (locus.lead_variant_id.empty()) return std::nullopt;
  for (std::size_t variant = 0; variant < window.variants.size(); ++variant) {
    if (records.variant_ids[window.sites[variant]] == locus.lead_variant_id) return variant;
  }
  throw Error(ExitCode::genotype_input, locus.name,
              "the lead variant " + locus.lead_variant_id + " is not among the genotype files' variants that vary in "
              "the trait's analysis samples (and pass the variant floors given)",
              "give the genotype files the scan read, or follow the locus up with --region");
}

LocusRows follow_up_locus(const TraitFollowUp& follow_up, const Locus& locus) {
  const WindowRecords records = read_window(*follow_up.options, locus);
  const TraitWindow window = window_for_trait(records, follow_up.set, follow_up.options->floors);
  const std::optional<std::size_t> lead = lead_in_window(locus, records, window);
  std::vector<std::string> labels;
  for (std::size_t site_idx : window.sites) labels.push_back(site_label(records.block.sites[site_idx]));
  ConditionalModelInputs inputs;
  inputs.set = &follow_up.set;
  inputs.penalized_refit = follow_up.options->penalized_refit;
  inputs.options = follow_up.options;
  inputs.samples = follow_up.samples;
  inputs.relatedness = follow_up.relatedness;
  const ConditionalFitter fit = [&](const std::vector<std::size_t>& conditioned) {
    return fit_conditional(inputs, window.variants, labels, conditioned);
  };
  const LocusSignals found = find_signals(fit, window.variants, lead, follow_up.settings);
  LocusRows rows;
  rows.signal_count = found.signals.size();
  std::string chosen;
  for (std::size_t signal_idx = 0; signal_idx < found.signals.size(); ++signal_idx) {
    append_signal_row(locus, records, window, found.signals[signal_idx], signal_idx + 1, rows.signals);
    append_credible_rows(records, window, found.signals[signal_idx], rows.credible);
    chosen += (chosen.empty() ? ": " : ", ") + records.variant_ids[window.sites[found.signals[signal_idx].variant]];
  }
  rows.log_line = "trait " + follow_up.set.trait + ", locus " + locus.name + ": " +
                  std::to_string(window.variants.size()) + " variants in the window, " +
                  std::to_string(found.signals.size()) + " signals" + chosen;
  return rows;
}

const char* kSignalsHeader =
    "signal\tlocus\tchromosome\tbase_pair_location\tvariant_id\teffect_allele\tother_allele\tjoint_beta\t"
    "joint_standard_error\tjoint_wald_p\tjoint_lr_p\tconditional_beta\tconditional_standard_error\tconditional_p\t"
    "credible_95_size\tcredible_99_size\tselection_order\tselection_p\tjoint_refit\twindow_variants\n";
const char* kCredibleHeader =
    "signal\tchromosome\tbase_pair_location\tvariant_id\tpip\tin_95\tin_99\tlog10_bayes_factor\tconditional_beta\t"
    "conditional_standard_error\tconditional_p\n";

double trait_sd(const Eigen::VectorXd& y) {
  const double mean = y.mean();
  return std::sqrt((y.array() - mean).square().sum() / static_cast<double>(std::max<Eigen::Index>(y.size() - 1, 1)));
}

}  // namespace

std::string signals_path(const std::string& out_prefix, const std::string& trait) {
  return out_prefix + "." + trait + ".signals.tsv";
}

std::string credible_path(const std::string& out_prefix, const std::string& trait) {
  return out_prefix + "." + trait + ".credible.tsv";
}

SignalsSummary run_signals(const SignalOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  const ScanOptions& scan = options.scan;
  tbb::global_control thread_limit(tbb::global_control::max_allowed_parallelism,
                                   static_cast<std::size_t>(std::max(scan.threads, 1)));
  RunLog& log = current_log();
  log.detail("command: " + scan.command_line);
  log.detail(std::string("version: tamis ") + TAMIS_VERSION);
  const std::vector<Locus> loci = loci_of(options);
  std::vector<std::string> samples;
  {
    GenotypeReaderOptions reader_options;
    reader_options.paths = scan.genotype_paths;
    samples = GenotypeReader(reader_options).sample_ids();
  }
  const TraitTable table = TraitTable::load(scan.traits_path, scan.table);
  std::optional<ScanRelatedness> relatedness;
  if (!scan.relatedness_paths.empty()) relatedness = load_scan_relatedness(scan.relatedness_paths, samples);
  const std::vector<ConditionVariant> conditions = read_condition_variants(scan);
  for (const ConditionVariant& variant : conditions) log.line("conditioning every locus on " + variant.label);
  const std::vector<bool> excluded = excluded_samples(scan.keep_samples_path, scan.drop_samples_path, samples);
  log.line("loci: " + std::to_string(loci.size()) + (options.loci_path.empty() ? " regions" : " from " + options.loci_path) +
           "; further signals need p below " + number_text(options.select_below));
  SignalsSummary summary;
  for (const std::string& trait_name : scan.traits) {
    TraitFollowUp follow_up;
    follow_up.options = &scan;
    follow_up.samples = &samples;
    follow_up.relatedness = relatedness ? &*relatedness : nullptr;
    follow_up.set = prepare_analysis_set(scan, table, samples, excluded, trait_name);
    add_condition_columns(conditions, follow_up.set);
    follow_up.settings.select_below = options.select_below;
    follow_up.settings.max_signals = options.max_signals;
    follow_up.settings.prior_effect_sd =
        options.prior_effect_sd > 0.0
            ? options.prior_effect_sd
            : default_prior_effect_sd(follow_up.set.kind == TraitKind::binary, trait_sd(follow_up.set.y));
    log.line("trait " + trait_name + ": credible sets with a prior effect SD of " +
             number_text(follow_up.settings.prior_effect_sd) +
             (follow_up.set.kind == TraitKind::binary ? " (log odds)" : " (trait units)"));
    std::vector<const Locus*> trait_loci;
    for (const Locus& locus : loci) {
      if (locus.trait.empty() || locus.trait == trait_name) trait_loci.push_back(&locus);
    }
    std::vector<LocusRows> rows(trait_loci.size());
    auto follow = [&](std::size_t locus_idx) { rows[locus_idx] = follow_up_locus(follow_up, *trait_loci[locus_idx]); };
    if (relatedness) {
      // The mixed model's refits log as they go, and the log is written from one thread.
      for (std::size_t locus_idx = 0; locus_idx < trait_loci.size(); ++locus_idx) follow(locus_idx);
    } else {
      tbb::parallel_for(std::size_t{0}, trait_loci.size(), follow);
    }
    PlainTextFile signals_file(signals_path(scan.out_prefix, trait_name));
    PlainTextFile credible_file(credible_path(scan.out_prefix, trait_name));
    signals_file.write(kSignalsHeader);
    credible_file.write(kCredibleHeader);
    for (const LocusRows& locus_rows : rows) {
      signals_file.write(locus_rows.signals);
      credible_file.write(locus_rows.credible);
      log.line(locus_rows.log_line);
      summary.signals += locus_rows.signal_count;
    }
    if (trait_loci.empty()) log.line("trait " + trait_name + ": no locus of the loci file belongs to this trait");
    signals_file.commit();
    credible_file.commit();
    summary.files.push_back(signals_file.final_path());
    summary.files.push_back(credible_file.final_path());
    summary.loci += trait_loci.size();
  }
  const double seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
  log.line("wall time: " + number_text(std::round(seconds * 100) / 100) + " s");
  return summary;
}

}  // namespace tamis
