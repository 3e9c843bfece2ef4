// One pass over a set results file, keeping every set (a whole exome's
// genes are some twenty thousand rows).
#include "report/set_results.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numeric>

#include "tamis/distributions.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_reader.hpp"
#include "tamis/results_writer.hpp"

namespace tamis::report {

namespace {

constexpr const char* p_value_columns[] = {"burden_p", "variance_p", "optimal_p", "cauchy_p", "overall_p"};
// Below this p the chi-square quantile is taken from its leading term: only
// ranks matter for the median, and the quantile function stops short of it.
constexpr double smallest_quantile_p = 1e-300;

struct SetColumns {
  std::size_t set, chromosome, start, end, n_variants, total_mac, neg_log_10_overall_p, top_variant;
  std::array<std::size_t, 5> p_values;
  explicit SetColumns(const ResultsReader& reader)
      : set(reader.column_index("set")),
        chromosome(reader.column_index("chromosome")),
        start(reader.column_index("start")),
        end(reader.column_index("end")),
        n_variants(reader.column_index("n_variants")),
        total_mac(reader.column_index("total_mac")),
        neg_log_10_overall_p(reader.column_index("neg_log_10_overall_p")),
        top_variant(reader.column_index("top_variant")) {
    for (std::size_t test_idx = 0; test_idx < p_values.size(); ++test_idx) {
      p_values[test_idx] = reader.column_index(p_value_columns[test_idx]);
    }
  }
};

[[noreturn]] void throw_damaged(const ResultsReader& reader, const std::string& column, const std::string& what) {
  throw Error(ExitCode::results_input, reader.place() + ", column " + column, what,
              "the line is damaged or the file was edited; restore it from the scan's output");
}

std::string checked_p_value(const ResultsReader& reader, std::size_t column, const char* name) {
  const std::string text(reader.field(column));
  if (text != "#NA" && !p_text_is_below(text, 1.0 + 1e-9).value_or(false)) {
    throw_damaged(reader, name, "expected a p-value, found '" + text + "'");
  }
  return text;
}

SetRow read_set_row(const ResultsReader& reader, const SetColumns& columns) {
  SetRow row;
  row.set = reader.field(columns.set);
  if (row.set.empty()) throw_damaged(reader, "set", "the set has no name");
  row.chromosome = reader.field(columns.chromosome);
  row.start = reader.integer(columns.start);
  row.end = reader.integer(columns.end);
  if (row.start < 1 || row.end < row.start) {
    throw_damaged(reader, "end", "the set's extent " + std::to_string(row.start) + "-" + std::to_string(row.end) +
                                     " is not a 1-based range whose end is at or after its start");
  }
  row.n_variants = std::to_string(reader.integer(columns.n_variants));
  reader.number(columns.total_mac);
  row.total_mac = reader.field(columns.total_mac);
  for (std::size_t test_idx = 0; test_idx < row.p_values.size(); ++test_idx) {
    row.p_values[test_idx] = checked_p_value(reader, columns.p_values[test_idx], p_value_columns[test_idx]);
  }
  row.neg_log_10_overall_p =
      reader.optional_number(columns.neg_log_10_overall_p).value_or(std::numeric_limits<double>::quiet_NaN());
  row.top_variant = reader.field(columns.top_variant);
  return row;
}

// The chi-square(1) statistic whose upper tail is 10^-neg_log_10_p.
float chisq_of(double neg_log_10_p) {
  if (std::isnan(neg_log_10_p)) return std::numeric_limits<float>::quiet_NaN();
  if (neg_log_10_p <= 0) return 0.0f;
  const double p = std::pow(10.0, -neg_log_10_p);
  if (p < smallest_quantile_p) return static_cast<float>(2.0 * neg_log_10_p * std::log(10.0));
  return static_cast<float>(chisq1_upper_quantile(p));
}

void add_point(SetResults& sets, const SetRow& row, ContigIndexer& contigs) {
  TraitResults& points = sets.points;
  points.chromosome_of.push_back(contigs.index_of(row.chromosome, points.chromosome_names));
  points.position_of.push_back(row.start + (row.end - row.start) / 2);
  points.neg_log_10_p_of.push_back(static_cast<float>(row.neg_log_10_overall_p));
  if (!std::isnan(row.neg_log_10_overall_p)) {
    points.max_neg_log_10_p = std::max(points.max_neg_log_10_p, row.neg_log_10_overall_p);
  }
  ++points.n_rows;
}

// Sets below the line become the plot's named points.
void mark_candidates(SetResults& sets) {
  if (sets.rows.empty()) return;
  sets.bonferroni_neg_log_10_p = -std::log10(set_family_alpha / static_cast<double>(sets.rows.size()));
  for (std::size_t set_idx = 0; set_idx < sets.rows.size(); ++set_idx) {
    const SetRow& row = sets.rows[set_idx];
    if (!(row.neg_log_10_overall_p > sets.bonferroni_neg_log_10_p)) continue;
    LeadCandidate candidate;
    candidate.variant_idx = set_idx;
    candidate.neg_log_10_p = row.neg_log_10_overall_p;
    candidate.p_value_text = row.p_values[4];
    candidate.variant_id = row.set;
    candidate.rsid = "#NA";
    sets.points.candidates.push_back(std::move(candidate));
  }
}

std::vector<std::size_t> sets_by_significance(const SetResults& sets) {
  std::vector<std::size_t> order(sets.rows.size());
  std::iota(order.begin(), order.end(), 0);
  auto significance = [&](std::size_t set_idx) {
    const double value = sets.rows[set_idx].neg_log_10_overall_p;
    return std::isnan(value) ? -1.0 : value;
  };
  std::stable_sort(order.begin(), order.end(),
                   [&](std::size_t left, std::size_t right) { return significance(left) > significance(right); });
  return order;
}

bool ends_with(const std::string& text, const std::string& ending) {
  return text.size() > ending.size() && text.compare(text.size() - ending.size(), ending.size(), ending) == 0;
}

}  // namespace

bool is_set_results_file(const std::string& path) {
  ResultsReader reader(path, {});
  return !reader.header().empty() && reader.header().front() == "set";
}

SetResults load_set_results(const std::string& path, const std::string& trait) {
  SetResults sets;
  sets.source_path = path;
  sets.points.trait = trait;
  sets.points.source_path = path;
  ResultsReader reader(path, set_result_columns());
  const SetColumns columns(reader);
  ContigIndexer contigs;
  while (reader.next_row()) {
    sets.rows.push_back(read_set_row(reader, columns));
    add_point(sets, sets.rows.back(), contigs);
    sets.overall_chisq.push_back(chisq_of(sets.rows.back().neg_log_10_overall_p));
  }
  order_chromosomes(sets.points);
  mark_candidates(sets);
  return sets;
}

std::vector<LeadLocus> set_leads(const SetResults& sets) {
  std::vector<std::size_t> order(sets.points.candidates.size());
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(), [&](std::size_t left, std::size_t right) {
    return sets.points.candidates[left].neg_log_10_p > sets.points.candidates[right].neg_log_10_p;
  });
  std::vector<LeadLocus> leads;
  for (std::size_t candidate_idx : order) {
    const SetRow& row = sets.rows[sets.points.candidates[candidate_idx].variant_idx];
    leads.push_back(LeadLocus{candidate_idx, row.start, row.end, 1});
  }
  return leads;
}

std::vector<SetRow> top_sets(const SetResults& sets, std::size_t limit) {
  std::vector<SetRow> rows;
  for (std::size_t set_idx : sets_by_significance(sets)) {
    if (rows.size() == limit) break;
    rows.push_back(sets.rows[set_idx]);
  }
  return rows;
}

std::string sibling_set_results_path(const std::string& results_path) {
  for (const char* suffix : {".tsv.gz", ".tsv.bgz", ".tsv"}) {
    if (ends_with(results_path, suffix)) {
      return results_path.substr(0, results_path.size() - std::string(suffix).size()) + ".sets" + suffix;
    }
  }
  return "";
}

}  // namespace tamis::report
