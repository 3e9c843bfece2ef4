// The report command: one pass per results file, then the tables and the page.
#include "tamis/report.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <map>
#include <optional>
#include <set>

#include "report/html_page.hpp"
#include "report/lead_loci.hpp"
#include "report/locus_ld.hpp"
#include "report/manhattan_plot.hpp"
#include "report/qq_plot.hpp"
#include "report/regional_plot.hpp"
#include "report/set_results.hpp"
#include "report/signal_marks.hpp"
#include "report/trait_results.hpp"
#include "scan/sample_lists.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {

namespace {

// The median of chi-square(1): R 4.2.2, qchisq(0.5, 1) = 0.45493642311957283.
constexpr double chisq1_median = 0.45493642311957283;

void check_options(const ReportOptions& options) {
  if (options.results.empty()) {
    throw Error(ExitCode::usage, "", "no results files were given", "name one or more PREFIX.TRAIT.tsv.gz files");
  }
  if (!(options.lead_threshold > 0.0 && options.lead_threshold <= 1.0)) {
    throw Error(ExitCode::usage, "", "the lead threshold must lie in (0, 1]",
                "give a p-value such as 5e-8 (the genome-wide convention)");
  }
  if (options.locus_radius < 0) {
    throw Error(ExitCode::usage, "", "the locus radius must not be negative", "give a distance such as 500 kb");
  }
  if (options.out_prefix.empty()) {
    throw Error(ExitCode::usage, "", "no output prefix was given", "name one, for example results/cohort.report");
  }
  check_output_prefix_writable(options.out_prefix);
  const RegionalPlotOptions& regional = options.regional;
  if (!regional.genotype_paths.empty() && regional.traits_path.empty()) {
    throw Error(ExitCode::usage, "", "regional plots need the trait table as well as the genotype files",
                "give the scan's trait table (and its covariates and sample lists, if it had any)");
  }
  if (regional.genotype_paths.empty() && !regional.signals_prefix.empty()) {
    throw Error(ExitCode::usage, "", "signals and credible sets are marked on the regional plots, which need the "
                "genotype files", "give the genotype files and trait table the scan read");
  }
}

// Trait names become parts of file names; anything but letters, digits, '.',
// '-' and '_' is replaced, and a repeated name gets a number.
std::string file_stem_for(const std::string& trait, std::set<std::string>& used) {
  std::string stem;
  for (char letter : trait) {
    bool plain = (letter >= 'a' && letter <= 'z') || (letter >= 'A' && letter <= 'Z') ||
                 (letter >= '0' && letter <= '9') || letter == '.' || letter == '-' || letter == '_';
    stem += plain ? letter : '_';
  }
  if (stem.empty()) stem = "trait";
  std::string unique = stem;
  for (int copy = 2; used.count(unique) > 0; ++copy) unique = stem + "-" + std::to_string(copy);
  used.insert(unique);
  return unique;
}

std::string format_number(double value, const char* format) {
  if (std::isnan(value)) return "#NA";
  char text[64];
  std::snprintf(text, sizeof text, format, value);
  return text;
}

std::string summary_line(const report::TraitResults& results, const TraitReport& trait) {
  return trait.trait + '\t' + std::to_string(trait.n_variants) + '\t' + format_number(trait.lambda_gc, "%.9g") +
         '\t' + std::to_string(results.n_below_genome_wide) + '\t' + std::to_string(trait.n_lead_loci) + '\t' +
         format_number(results.max_neg_log_10_p, "%.9g") + '\t' + std::to_string(results.n_discordant) + '\n';
}

report::LocusRow make_locus_row(const report::TraitResults& results, const report::LeadLocus& lead) {
  const report::LeadCandidate& candidate = results.candidates[lead.candidate_idx];
  report::LocusRow row;
  row.trait = results.trait;
  row.chromosome = results.chromosome_names[results.chromosome_of[candidate.variant_idx]];
  row.lead_position = results.position_of[candidate.variant_idx];
  row.lead_variant_id = candidate.variant_id;
  row.lead_rsid = candidate.rsid;
  row.p_value = candidate.p_value_text;
  row.neg_log_10_p_value = candidate.neg_log_10_p_text;
  row.beta = candidate.beta_text;
  row.span_start = lead.span_start;
  row.span_end = lead.span_end;
  row.n_variants = lead.n_variants;
  return row;
}

std::string locus_line(const report::LocusRow& row) {
  return row.trait + '\t' + row.chromosome + '\t' + std::to_string(row.lead_position) + '\t' + row.lead_variant_id +
         '\t' + row.lead_rsid + '\t' + row.p_value + '\t' + row.neg_log_10_p_value + '\t' + row.beta + '\t' +
         std::to_string(row.span_start) + '\t' + std::to_string(row.span_end) + '\t' + std::to_string(row.n_variants) +
         '\n';
}

std::string top_set_line(const std::string& trait, const report::SetRow& row) {
  std::string line = trait + '\t' + row.set + '\t' + row.chromosome + '\t' + std::to_string(row.start) + '\t' +
                     std::to_string(row.end) + '\t' + row.n_variants + '\t' + row.total_mac;
  for (const std::string& p_value : row.p_values) line += '\t' + p_value;
  return line + '\t' + row.top_variant + '\n';
}

bool file_exists(const std::string& path) { return std::ifstream(path).good(); }

// The results files and the set files among --results, each set file
// keyed by the results file of its trait (PREFIX.TRAIT.tsv.gz).
struct ResultsInputs {
  std::vector<std::string> results;
  std::map<std::string, std::string> sets_of;
};

ResultsInputs sort_results_inputs(const std::vector<std::string>& paths) {
  ResultsInputs inputs;
  std::vector<std::string> set_paths;
  for (const std::string& path : paths) {
    (report::is_set_results_file(path) ? set_paths : inputs.results).push_back(path);
  }
  for (const std::string& results : inputs.results) {
    const std::string sibling = report::sibling_set_results_path(results);
    if (!sibling.empty() && file_exists(sibling)) inputs.sets_of[results] = sibling;
  }
  for (const std::string& set_path : set_paths) {
    auto owner = std::find_if(inputs.results.begin(), inputs.results.end(), [&](const std::string& results) {
      return report::sibling_set_results_path(results) == set_path;
    });
    if (owner == inputs.results.end()) {
      throw Error(ExitCode::usage, set_path,
                  "this set results file has no results file of its trait among --results",
                  "list PREFIX.TRAIT.tsv.gz too; its set results PREFIX.TRAIT.sets.tsv.gz are then found beside it");
    }
  }
  return inputs;
}

void write_text(const std::string& path, const std::string& text, ReportSummary& summary) {
  PlainTextFile file(path);
  file.write(text);
  file.commit();
  summary.written_files.push_back(path);
}

}  // namespace

double compute_lambda_gc(std::vector<float> score_chisq) {
  auto is_missing = [](float value) { return std::isnan(value); };
  score_chisq.erase(std::remove_if(score_chisq.begin(), score_chisq.end(), is_missing), score_chisq.end());
  if (score_chisq.empty()) return std::numeric_limits<double>::quiet_NaN();
  const std::size_t middle = score_chisq.size() / 2;
  std::nth_element(score_chisq.begin(), score_chisq.begin() + middle, score_chisq.end());
  double median = score_chisq[middle];
  if (score_chisq.size() % 2 == 0) {
    const double below = *std::max_element(score_chisq.begin(), score_chisq.begin() + middle);
    median = 0.5 * (below + median);
  }
  return median / chisq1_median;
}

namespace {

// The set plots and table of one trait; the trait's summary gains the set counts.
report::SetSection report_sets(const ReportOptions& options, const std::string& trait_name, const std::string& path,
                               const std::string& stem, TraitReport& trait, std::string& top_sets_text,
                               ReportSummary& summary) {
  const report::SetResults sets = report::load_set_results(path, trait_name + " \u00b7 variant sets");
  trait.sets_path = path;
  trait.n_sets = sets.rows.size();
  trait.set_lambda = compute_lambda_gc(sets.overall_chisq);

  report::SetSection section;
  section.results_path = path;
  section.n_sets = sets.rows.size();
  section.lambda_text = format_number(trait.set_lambda, "%.4f");
  section.manhattan_png = stem + ".sets.manhattan.png";
  section.qq_png = stem + ".sets.qq.png";
  report::ManhattanFacts facts;
  facts.lambda_gc = trait.set_lambda;
  facts.label_limit = options.label_limit;
  facts.count_noun = "sets";
  facts.lambda_label = "\u03bb of overall p";
  facts.lead_noun_one = "set below the line";
  facts.lead_noun_many = "sets below the line";
  facts.lines.clear();
  if (!sets.rows.empty()) {
    section.line_text = report::format_p_threshold(std::pow(10.0, -sets.bonferroni_neg_log_10_p), 2);
    facts.lines.push_back({sets.bonferroni_neg_log_10_p, section.line_text, true});
  }
  report::render_manhattan(sets.points, report::set_leads(sets), facts, section.manhattan_png,
                           stem + ".sets.manhattan.svg");
  report::QqFacts qq_facts;
  qq_facts.lambda_gc = trait.set_lambda;
  qq_facts.lambda_note = "overall p; median \u03c7\u00b2(1) quantile / 0.4549";
  qq_facts.count_noun = "sets (overall p)";
  report::render_qq(sets.points, qq_facts, section.qq_png, stem + ".sets.qq.svg");
  for (const char* written : {".sets.manhattan.png", ".sets.manhattan.svg", ".sets.qq.png", ".sets.qq.svg"}) {
    summary.written_files.push_back(stem + written);
  }
  section.top = report::top_sets(sets, options.top_sets);
  for (const report::SetRow& row : section.top) top_sets_text += top_set_line(trait_name, row);
  return section;
}

// What every trait's regional plots share: the genotype files, their
// samples, the trait table and the samples the lists leave out.
struct RegionalContext {
  explicit RegionalContext(const RegionalPlotOptions& regional)
      : options(regional), table(TraitTable::load(regional.traits_path, regional.table)) {
    genotypes.paths = regional.genotype_paths;
    genotypes.field = regional.dosage_field;
    genotypes.haploid_dosage = regional.haploid_dosage;
    genotype_samples = GenotypeReader(genotypes).sample_ids();
    excluded = excluded_samples(regional.keep_samples_path, regional.drop_samples_path, genotype_samples);
  }

  const RegionalPlotOptions& options;
  GenotypeReaderOptions genotypes;
  std::vector<std::string> genotype_samples;
  std::vector<bool> excluded;
  TraitTable table;
};

// The table columns the scan adjusted for. The sidecar's adjusted_covariates
// also lists the variants a scan conditioned on; those are left out, since
// their missing dosages were imputed and drop no sample.
std::vector<std::string> covariates_for(const RegionalPlotOptions& options, const std::string& results_path) {
  if (options.covariates) return *options.covariates;
  const std::string sidecar = results_path + "-meta.yaml";
  if (!file_exists(sidecar)) return {};
  const SidecarFields fields = read_metadata_sidecar(sidecar);
  std::set<std::string> conditioned;
  for (const auto& [key, value] : fields.extra) {
    if (key != kConditionedOnKey) continue;
    for (std::size_t start = 0; start <= value.size();) {
      const std::size_t comma = std::min(value.find(", ", start), value.size());
      conditioned.insert(value.substr(start, comma - start));
      start = comma + 2;
    }
  }
  std::vector<std::string> covariates;
  for (const std::string& covariate : fields.adjusted_covariates) {
    if (!conditioned.count(covariate)) covariates.push_back(covariate);
  }
  return covariates;
}

// The trait's analysis samples as the scan chose them, in the genotype files' order.
std::vector<std::size_t> analysis_samples_of(const RegionalContext& context, const report::TraitResults& results) {
  AnalysisRequest request;
  request.trait = results.trait;
  request.covariates = covariates_for(context.options, results.source_path);
  request.excluded_samples = context.excluded;
  return build_analysis_set(context.table, context.genotype_samples, request).genotype_index;
}

// A lead tested on other samples than these means the inputs differ from
// the scan's, and r^2 would describe another group of people.
void check_sample_count(const report::TraitResults& results, const report::LocusWindow& window, std::size_t count) {
  if (window.lead_sample_count == count) return;
  throw Error(ExitCode::usage, results.source_path + " (" + window.lead_variant_id + ")",
              "the scan tested trait " + results.trait + " on " + std::to_string(window.lead_sample_count) +
                  " samples (column n), but the trait table, covariates and sample lists given here leave " +
                  std::to_string(count),
              "give the trait table, covariates and sample lists the scan was given");
}

std::string ld_lines(const std::string& trait, const report::LocusWindow& window) {
  std::string text;
  for (const report::WindowVariant& variant : window.variants) {
    text += trait + '\t' + std::to_string(window.rank) + '\t' + window.lead_variant_id + '\t' + window.chromosome +
            '\t' + std::to_string(variant.position) + '\t' + variant.variant_id + '\t' +
            format_number(variant.neg_log_10_p, "%.6g") + '\t' + format_number(variant.r_squared, "%.12g") + '\n';
  }
  return text;
}

std::string regional_note(const std::string& signals_prefix, const std::string& trait,
                          const report::SignalMarks& marks) {
  if (signals_prefix.empty()) return "";
  if (marks.empty()) {
    return "No signals marked: neither " + report::signals_file_path(signals_prefix, trait) + " nor " +
           report::credible_file_path(signals_prefix, trait) + " exists.";
  }
  std::string note = "Marked from";
  if (!marks.signals_path.empty()) note += " " + marks.signals_path + " (other signals' leads)";
  if (!marks.credible_path.empty()) {
    note += std::string(marks.signals_path.empty() ? "" : " and") + " " + marks.credible_path + " (credible sets)";
  }
  return note + ".";
}

// The regional plots of one trait's most significant lead loci.
void report_regional(const RegionalContext& context, const report::TraitResults& results,
                     const std::vector<report::LeadLocus>& leads, std::int64_t radius, const std::string& stem,
                     TraitReport& trait, report::TraitSection& section, std::string& ld_text,
                     ReportSummary& summary) {
  std::vector<report::LocusWindow> windows =
      report::make_locus_windows(results, leads, radius, context.options.plots_per_trait);
  if (windows.empty()) return;
  report::collect_window_rows(results.source_path, windows);
  const std::vector<std::size_t> samples = analysis_samples_of(context, results);
  // Every window measured before any is drawn: a lead missing from the
  // genotype files stops the report before any of its regional plots exists.
  for (report::LocusWindow& window : windows) {
    check_sample_count(results, window, samples.size());
    report::measure_window_ld(context.genotypes, samples, window);
  }
  report::SignalMarks marks;
  if (!context.options.signals_prefix.empty()) {
    marks = report::load_signal_marks(context.options.signals_prefix, results.trait);
  }
  report::RegionalFacts facts;
  facts.trait = results.trait;
  facts.analysis_samples = samples.size();
  facts.marks = marks.empty() ? nullptr : &marks;

  section.regional_note = regional_note(context.options.signals_prefix, results.trait, marks);
  for (const report::LocusWindow& window : windows) {
    const std::string name = stem + ".locus-" + std::to_string(window.rank);
    report::render_regional(window, facts, name + ".png", name + ".svg");
    summary.written_files.push_back(name + ".png");
    summary.written_files.push_back(name + ".svg");
    ld_text += ld_lines(results.trait, window);
    section.regional.push_back({name + ".png", "locus " + std::to_string(window.rank) + ", lead " + window.lead_name});
  }
  trait.regional_plots = section.regional.size();
}

}  // namespace

ReportSummary run_report(const ReportOptions& options) {
  check_options(options);
  const ResultsInputs inputs = sort_results_inputs(options.results);
  ReportSummary summary;
  report::PageContent page;
  std::string summary_text =
      "trait\tn_variants\tlambda_gc\tn_below_5e-8\tn_lead_loci\tmax_neg_log_10_p\tn_discordant\n";
  std::string loci_text =
      "trait\tchromosome\tlead_position\tlead_variant_id\tlead_rsid\tp_value\tneg_log_10_p_value\tbeta\tspan_start\t"
      "span_end\tn_variants\n";
  std::string top_sets_text =
      "trait\tset\tchromosome\tstart\tend\tn_variants\ttotal_mac\tburden_p\tvariance_p\toptimal_p\tcauchy_p\t"
      "overall_p\ttop_variant\n";
  std::string ld_text =
      "trait\tlocus\tlead_variant_id\tchromosome\tbase_pair_location\tvariant_id\tneg_log_10_p_value\tr2_with_lead\n";
  std::set<std::string> used_stems;
  std::optional<RegionalContext> regional;
  if (!options.regional.genotype_paths.empty()) regional.emplace(options.regional);

  for (const std::string& path : inputs.results) {
    report::TraitResults results = report::load_trait_results(path, options.lead_threshold);
    TraitReport trait;
    trait.trait = results.trait;
    trait.results_path = path;
    trait.n_variants = results.n_rows;
    trait.lambda_gc = compute_lambda_gc(std::move(results.score_chisq_of));
    results.score_chisq_of = {};
    const std::vector<report::LeadLocus> leads = report::group_lead_loci(results, options.locus_radius);
    trait.n_lead_loci = leads.size();

    const std::string stem = options.out_prefix + "." + file_stem_for(results.trait, used_stems);
    report::TraitSection section;
    section.trait = results.trait;
    section.results_path = path;
    section.log_path = results.log_path;
    section.manhattan_png = stem + ".manhattan.png";
    section.qq_png = stem + ".qq.png";
    report::ManhattanFacts facts;
    facts.lambda_gc = trait.lambda_gc;
    facts.label_limit = options.label_limit;
    trait.manhattan_points_drawn =
        report::render_manhattan(results, leads, facts, section.manhattan_png, stem + ".manhattan.svg");
    report::QqFacts qq_facts;
    qq_facts.lambda_gc = trait.lambda_gc;
    trait.qq_points_drawn = report::render_qq(results, qq_facts, section.qq_png, stem + ".qq.svg");
    for (const char* written : {".manhattan.png", ".manhattan.svg", ".qq.png", ".qq.svg"}) {
      summary.written_files.push_back(stem + written);
    }

    summary_text += summary_line(results, trait);
    for (const report::LeadLocus& lead : leads) {
      report::LocusRow row = make_locus_row(results, lead);
      loci_text += locus_line(row);
      if (section.loci.size() < options.page_loci_limit) section.loci.push_back(std::move(row));
    }
    section.n_loci_total = leads.size();
    section.summary_cells = {results.trait,
                             std::to_string(trait.n_variants),
                             format_number(trait.lambda_gc, "%.4f"),
                             std::to_string(results.n_below_genome_wide),
                             std::to_string(trait.n_lead_loci),
                             format_number(results.max_neg_log_10_p, "%.2f"),
                             std::to_string(results.n_discordant)};
    auto set_path = inputs.sets_of.find(path);
    if (set_path != inputs.sets_of.end()) {
      section.sets = report_sets(options, results.trait, set_path->second, stem, trait, top_sets_text, summary);
    }
    if (regional) {
      report_regional(*regional, results, leads, options.locus_radius, stem, trait, section, ld_text, summary);
    }
    page.sections.push_back(std::move(section));
    summary.traits.push_back(trait);
  }

  write_text(options.out_prefix + ".summary.tsv", summary_text, summary);
  write_text(options.out_prefix + ".loci.tsv", loci_text, summary);
  if (!inputs.sets_of.empty()) write_text(options.out_prefix + ".top_sets.tsv", top_sets_text, summary);
  if (regional) write_text(options.out_prefix + ".locus_ld.tsv", ld_text, summary);
  page.lead_threshold = options.lead_threshold;
  page.locus_radius = options.locus_radius;
  write_text(options.out_prefix + ".html", report::compose_html_page(page), summary);
  return summary;
}

}  // namespace tamis
