// What the report keeps of a set results file (PREFIX.TRAIT.sets.tsv.gz,
// written by `scan --sets`): every set's row for the table of top sets, and
// the same sets as plot points, one per set at its midpoint, so that the
// variant plots' code draws them.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "report/lead_loci.hpp"
#include "report/trait_results.hpp"

namespace tamis::report {

// One set as the table lists it; numbers kept as written, so that a p-value
// below the double range survives.
struct SetRow {
  std::string set, chromosome;
  std::int64_t start = 0, end = 0;
  std::string n_variants, total_mac;
  // burden_p, variance_p, optimal_p, cauchy_p, overall_p
  std::array<std::string, 5> p_values;
  std::string top_variant;
  double neg_log_10_overall_p = 0;  // full precision: it orders the table
};

struct SetResults {
  std::string source_path;
  std::vector<SetRow> rows;  // in file order
  // One point per set: position_of is the midpoint (start + end) / 2,
  // neg_log_10_p_of the overall p; candidates are the sets below the
  // plot's line (Bonferroni for the sets in the file), named by set.
  TraitResults points;
  std::vector<float> overall_chisq;  // chi-square(1) quantile of each overall p
  double bonferroni_neg_log_10_p = 0;  // -log10(0.05 / sets); 0 without sets
};

// The family-wise level that the set plot's line divides among the sets (common practice).
constexpr double set_family_alpha = 0.05;

// Whether the file's header is a set results header (first column "set").
// Throws tamis::Error (results_input) when the file cannot be read.
bool is_set_results_file(const std::string& path);

// Reads every row. Throws tamis::Error (results_input) naming the file, line
// and column for a damaged file (a missing column, a wrong field count, a
// p-value or number that does not read).
SetResults load_set_results(const std::string& path, const std::string& trait);

// The sets below the line, each its own lead, most significant first.
std::vector<LeadLocus> set_leads(const SetResults& sets);

// The `limit` sets of smallest overall p (ties: file order).
std::vector<SetRow> top_sets(const SetResults& sets, std::size_t limit);

// PREFIX.TRAIT.sets.tsv.gz for PREFIX.TRAIT.tsv.gz (any of the results
// suffixes); empty when the name has none of them.
std::string sibling_set_results_path(const std::string& results_path);

}  // namespace tamis::report
