#include "report/locus_ld.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <optional>
#include <unordered_map>

#include "scan/variant_keys.hpp"
#include "tamis/errors.hpp"
#include "tamis/linkage_disequilibrium.hpp"
#include "tamis/results_reader.hpp"

namespace tamis::report {

namespace {

constexpr std::size_t records_per_batch = 512;

std::string site_variant_id(const VariantSite& site, const std::string& chromosome) {
  return chromosome + "_" + std::to_string(site.position) + "_" + site.ref + "_" + site.alt;
}

std::string lead_place(const LocusWindow& window) {
  return chromosome_display_name(window.chromosome) + ":" + std::to_string(window.lead_position);
}

// Calls `visit(site, dosages over the analysis samples, imputed)` for every
// site of the results' chromosome between `first` and `last`.
template <typename Visit>
void read_sites(const GenotypeReaderOptions& genotypes, const std::vector<std::size_t>& analysis_samples,
                const LocusWindow& window, std::int64_t first, std::int64_t last, Visit visit) {
  GenotypeReaderOptions options = genotypes;
  options.regions.clear();
  for (const std::string& contig : contig_candidates(window.chromosome)) {
    options.regions.push_back({contig, first, last});
  }
  GenotypeReader reader(options);
  RecordBatch batch;
  DosageBlock block;
  std::vector<double> dosages(analysis_samples.size());
  while (reader.read_batch(batch, records_per_batch) > 0) {
    block.clear();
    batch.decode(block);
    for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
      const double* site = block.site_dosages(site_idx);
      for (std::size_t sample_idx = 0; sample_idx < analysis_samples.size(); ++sample_idx) {
        dosages[sample_idx] = site[analysis_samples[sample_idx]];
      }
      const bool called = impute_missing_with_mean(dosages);
      visit(block.sites[site_idx], called, dosages);
    }
  }
}

std::string joined_paths(const std::vector<std::string>& paths) {
  std::string text;
  for (const std::string& path : paths) text += (text.empty() ? "" : ", ") + path;
  return text;
}

}  // namespace

std::vector<LocusWindow> make_locus_windows(const TraitResults& results, const std::vector<LeadLocus>& leads,
                                            std::int64_t radius, std::size_t count) {
  std::vector<LocusWindow> windows;
  for (std::size_t lead_idx = 0; lead_idx < leads.size() && lead_idx < count; ++lead_idx) {
    const LeadCandidate& lead = results.candidates[leads[lead_idx].candidate_idx];
    LocusWindow window;
    window.rank = lead_idx + 1;
    window.chromosome = results.chromosome_names[results.chromosome_of[lead.variant_idx]];
    window.lead_position = results.position_of[lead.variant_idx];
    window.first = std::max<std::int64_t>(1, window.lead_position - radius);
    window.last = window.lead_position + radius;
    window.lead_variant_id = lead.variant_id;
    window.lead_name = lead.rsid.empty() || lead.rsid == "#NA" ? lead.variant_id : lead.rsid;
    window.lead_p_text = lead.p_value_text;
    windows.push_back(std::move(window));
  }
  return windows;
}

void collect_window_rows(const std::string& results_path, std::vector<LocusWindow>& windows) {
  if (windows.empty()) return;
  ResultsReader reader(results_path, {"chromosome", "base_pair_location", "variant_id", "neg_log_10_p_value", "n"});
  const std::size_t chromosome = reader.column_index("chromosome");
  const std::size_t position = reader.column_index("base_pair_location");
  const std::size_t variant_id = reader.column_index("variant_id");
  const std::size_t neg_log_10_p = reader.column_index("neg_log_10_p_value");
  const std::size_t sample_count = reader.column_index("n");
  while (reader.next_row()) {
    const std::string_view row_chromosome = reader.field(chromosome);
    std::optional<std::int64_t> row_position;
    for (LocusWindow& window : windows) {
      if (row_chromosome != window.chromosome) continue;
      if (!row_position) row_position = reader.integer(position);
      if (*row_position < window.first || *row_position > window.last) continue;
      WindowVariant variant;
      variant.variant_id = reader.field(variant_id);
      variant.position = *row_position;
      const std::optional<double> significance = reader.optional_number(neg_log_10_p);
      variant.neg_log_10_p = significance ? static_cast<float>(*significance) : std::nanf("");
      variant.r_squared = std::numeric_limits<double>::quiet_NaN();
      if (variant.variant_id == window.lead_variant_id) {
        window.lead_idx = window.variants.size();
        window.lead_sample_count = static_cast<std::size_t>(reader.integer(sample_count));
      }
      window.variants.push_back(std::move(variant));
    }
  }
}

void measure_window_ld(const GenotypeReaderOptions& genotypes, const std::vector<std::size_t>& analysis_samples,
                       LocusWindow& window) {
  // The lead first, alone, so that the window's other sites can be measured
  // as they stream past instead of being held.
  std::vector<double> lead;
  read_sites(genotypes, analysis_samples, window, window.lead_position, window.lead_position,
             [&](const VariantSite& site, bool called, const std::vector<double>& dosages) {
               if (called && site_variant_id(site, window.chromosome) == window.lead_variant_id) lead = dosages;
             });
  if (lead.empty() || std::isnan(dosage_r_squared(lead, lead))) {
    throw Error(ExitCode::genotype_input, joined_paths(genotypes.paths) + " (" + lead_place(window) + ")",
                lead.empty() ? "the lead variant " + window.lead_variant_id +
                                   " is not in the genotype files (or has no called dosage)"
                             : "the lead variant " + window.lead_variant_id +
                                   " does not vary among the trait's analysis samples",
                "give the genotype files the scan read, with their .tbi/.csi indexes, and the scan's trait table, "
                "covariates and sample lists");
  }

  std::unordered_map<std::string, std::size_t> variant_of;
  for (std::size_t variant_idx = 0; variant_idx < window.variants.size(); ++variant_idx) {
    variant_of.emplace(window.variants[variant_idx].variant_id, variant_idx);
  }
  read_sites(genotypes, analysis_samples, window, window.first, window.last,
             [&](const VariantSite& site, bool called, const std::vector<double>& dosages) {
               auto found = variant_of.find(site_variant_id(site, window.chromosome));
               if (found == variant_of.end() || !called) return;
               window.variants[found->second].r_squared = dosage_r_squared(lead, dosages);
             });
  window.unmeasured = static_cast<std::size_t>(
      std::count_if(window.variants.begin(), window.variants.end(),
                    [](const WindowVariant& variant) { return std::isnan(variant.r_squared); }));
}

}  // namespace tamis::report
