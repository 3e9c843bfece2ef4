// The report page: one HTML file with the plots inlined as PNG data URIs, the
// summary and lead loci tables and the run logs' headers; nothing external.
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "report/set_results.hpp"

namespace tamis::report {

struct LocusRow {
  std::string trait, chromosome;
  std::int64_t lead_position = 0;
  std::string lead_variant_id, lead_rsid, p_value, neg_log_10_p_value, beta;
  std::int64_t span_start = 0, span_end = 0;
  std::size_t n_variants = 0;
};

// A trait's set results: their plots and the sets of smallest overall p.
struct SetSection {
  std::string results_path;
  std::string manhattan_png, qq_png;
  std::vector<SetRow> top;
  std::size_t n_sets = 0;
  std::string lambda_text;  // formatted, "#NA" when there is none
  std::string line_text;    // the Bonferroni p drawn on the plot
};

// One regional plot, inlined under the trait's lead loci.
struct RegionalEntry {
  std::string png;          // read back and inlined
  std::string description;  // its alt text: "locus 1, lead rs123"
};

struct TraitSection {
  std::string trait, results_path, log_path;
  std::string manhattan_png, qq_png;     // read back and inlined
  std::vector<std::string> summary_cells;  // in the summary table's column order
  std::vector<LocusRow> loci;            // the most significant, up to the page limit
  std::size_t n_loci_total = 0;
  std::optional<SetSection> sets;
  std::vector<RegionalEntry> regional;  // empty without genotype files, or without lead loci
  std::string regional_note;            // where the signal marks came from, or that none were found
};

struct PageContent {
  std::vector<TraitSection> sections;
  double lead_threshold = 5e-8;
  std::int64_t locus_radius = 500000;
};

std::string compose_html_page(const PageContent& page);

// 5e-08 -> "5e-8", as thresholds are usually written.
std::string format_p_threshold(double p, int significant_digits = 6);

// Pieces, exposed for the tests.
std::string encode_base64(const std::string& bytes);
std::string escape_html(const std::string& text);
// The lines of a run log before its first "read " line (command, version,
// inputs, samples, null models); empty when the log cannot be read.
std::vector<std::string> read_log_header(const std::string& log_path);

}  // namespace tamis::report
