// Matching the table to the genotype samples and encoding the design matrix
// for one trait.

#include <cmath>
#include <map>
#include <set>
#include <sstream>
#include <string>
#include <unordered_map>
#include <vector>

#include "tamis/errors.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {
namespace {

constexpr std::size_t kShownIds = 3;

std::string quote(const std::string& text) { return "\"" + text + "\""; }

std::string format_value(double value) {
  std::ostringstream text;
  text.precision(10);
  text << value;
  return text.str();
}

std::string show_first_ids(const std::vector<std::string>& ids) {
  std::string shown;
  for (std::size_t id_idx = 0; id_idx < ids.size() && id_idx < kShownIds; ++id_idx) {
    if (id_idx > 0) shown += ", ";
    shown += quote(ids[id_idx]);
  }
  if (ids.size() > kShownIds) shown += ", ...";
  return shown;
}

// Model-level problems with one column still point at the table it came from.
std::string column_place(const TraitTable& table, const std::string& column_name) {
  return table.path() + ", column " + quote(column_name);
}

void check_request(const AnalysisRequest& request) {
  std::set<std::string> seen;
  for (const std::string& covariate : request.covariates) {
    if (covariate == request.trait) {
      throw Error(ExitCode::usage, "",
                  "the trait " + quote(covariate) + " is also listed as a covariate",
                  "remove " + quote(covariate) + " from the covariates");
    }
    if (!seen.insert(covariate).second) {
      throw Error(ExitCode::usage, "", "the covariate " + quote(covariate) + " is listed twice",
                  "list each covariate once");
    }
  }
}

const TableColumn& find_trait_column(const TraitTable& table, const std::string& trait) {
  const TableColumn& column = table.column(trait);
  if (column.numeric) return column;
  std::string example;
  for (std::size_t row_idx = 0; row_idx < column.tokens.size(); ++row_idx) {
    if (column.missing[row_idx]) continue;
    example = " (line " + std::to_string(table.line_numbers()[row_idx]) + " has " +
              quote(column.tokens[row_idx]) + ")";
    break;
  }
  throw Error(ExitCode::table_input, table.path(),
              "the trait column " + quote(trait) + " holds text, not numbers" + example,
              "code a quantitative trait as numbers and a binary trait as 0 (control) and 1 "
              "(case); text columns can only be covariates");
}

// Each genotype sample's row in the table, in genotype order; rows without a
// genotype sample are counted as table_only.
struct SampleMatch {
  std::vector<std::size_t> genotype_positions;
  std::vector<std::size_t> table_rows;
};

SampleMatch match_samples(const TraitTable& table, const std::vector<std::string>& genotype_samples,
                          SampleAccounting* accounting) {
  std::unordered_map<std::string, std::size_t> row_of_id;
  row_of_id.reserve(table.row_count());
  for (std::size_t row_idx = 0; row_idx < table.row_count(); ++row_idx) {
    row_of_id.emplace(table.sample_ids()[row_idx], row_idx);
  }
  SampleMatch match;
  std::vector<bool> row_used(table.row_count(), false);
  std::size_t rows_used = 0;
  for (std::size_t genotype_idx = 0; genotype_idx < genotype_samples.size(); ++genotype_idx) {
    auto found = row_of_id.find(genotype_samples[genotype_idx]);
    if (found == row_of_id.end()) continue;
    match.genotype_positions.push_back(genotype_idx);
    match.table_rows.push_back(found->second);
    if (!row_used[found->second]) {
      row_used[found->second] = true;
      ++rows_used;
    }
  }
  accounting->genotype_samples = genotype_samples.size();
  accounting->table_rows = table.row_count();
  accounting->matched = match.table_rows.size();
  accounting->genotype_only = genotype_samples.size() - match.table_rows.size();
  accounting->table_only = table.row_count() - rows_used;
  if (match.table_rows.empty()) {
    throw Error(ExitCode::table_input, table.path(),
                "no sample ID is shared by the genotype files (" +
                    std::to_string(genotype_samples.size()) + " samples, e.g. " +
                    show_first_ids(genotype_samples) + ") and the table column " +
                    quote(table.sample_column_name()) + " (" +
                    std::to_string(table.row_count()) + " rows, e.g. " +
                    show_first_ids(table.sample_ids()) + ")",
                "check that --sample-column names the column holding the IDs used in the "
                "genotype files, and that the IDs are written the same way (prefixes, "
                "family/individual joins, letter case)");
  }
  return match;
}

bool has_all_covariates(const std::vector<const TableColumn*>& covariates, std::size_t row_idx) {
  for (const TableColumn* covariate : covariates) {
    if (covariate->missing[row_idx]) return false;
  }
  return true;
}

// Keeps the matched samples that have the trait and every covariate.
std::vector<std::size_t> select_complete_samples(const TraitTable& table,
                                                 const SampleMatch& match,
                                                 const TableColumn& trait,
                                                 const std::vector<const TableColumn*>& covariates,
                                                 const std::vector<bool>& excluded,
                                                 AnalysisSet* set) {
  std::vector<std::size_t> rows;
  for (std::size_t match_idx = 0; match_idx < match.table_rows.size(); ++match_idx) {
    const std::size_t row_idx = match.table_rows[match_idx];
    const std::size_t genotype_idx = match.genotype_positions[match_idx];
    if (genotype_idx < excluded.size() && excluded[genotype_idx]) {
      ++set->accounting.excluded_by_list;
    } else if (trait.missing[row_idx]) {
      ++set->accounting.missing_trait;
    } else if (!has_all_covariates(covariates, row_idx)) {
      ++set->accounting.missing_covariate;
    } else {
      rows.push_back(row_idx);
      set->genotype_index.push_back(match.genotype_positions[match_idx]);
    }
  }
  set->accounting.analysed = rows.size();
  if (rows.empty()) {
    const SampleAccounting& counts = set->accounting;
    throw Error(ExitCode::model, column_place(table, trait.name),
                "no sample is left to analyse the trait " + quote(trait.name) + ": of " +
                    std::to_string(counts.matched) + " samples in both the genotype files and "
                    "the table, " + std::to_string(counts.missing_trait) +
                    " lack the trait and " + std::to_string(counts.missing_covariate) +
                    " lack a covariate",
                "check the missing-value tokens, or drop covariates that are missing for many "
                "samples");
  }
  return rows;
}

bool is_zero_or_one(double value) { return value == 0.0 || value == 1.0; }

TraitKind decide_trait_kind(const TraitTable& table, const TableColumn& trait,
                            const std::vector<std::size_t>& rows,
                            const std::optional<TraitKind>& kind_override) {
  std::size_t first_other_row = rows.size();
  for (std::size_t sample_idx = 0; sample_idx < rows.size(); ++sample_idx) {
    if (!is_zero_or_one(trait.values[rows[sample_idx]])) {
      first_other_row = sample_idx;
      break;
    }
  }
  const bool coded_zero_one = first_other_row == rows.size();
  if (!kind_override) return coded_zero_one ? TraitKind::binary : TraitKind::quantitative;
  if (*kind_override == TraitKind::binary && !coded_zero_one) {
    const std::size_t row_idx = rows[first_other_row];
    throw Error(ExitCode::model,
                table.path() + ", line " + std::to_string(table.line_numbers()[row_idx]),
                "the trait " + quote(trait.name) + " is declared binary but has the value " +
                    format_value(trait.values[row_idx]) + "; a binary trait must be 0 or 1",
                "recode the trait to 0 (control) and 1 (case), or treat it as quantitative");
  }
  return *kind_override;
}

void fill_trait(const TableColumn& trait, const std::vector<std::size_t>& rows, AnalysisSet* set) {
  set->y.resize(static_cast<Eigen::Index>(rows.size()));
  for (std::size_t sample_idx = 0; sample_idx < rows.size(); ++sample_idx) {
    set->y(static_cast<Eigen::Index>(sample_idx)) = trait.values[rows[sample_idx]];
  }
}

void check_trait_varies(const TraitTable& table, AnalysisSet* set) {
  const std::size_t sample_count = static_cast<std::size_t>(set->y.size());
  if (set->kind == TraitKind::binary) {
    std::size_t cases = 0;
    for (Eigen::Index sample_idx = 0; sample_idx < set->y.size(); ++sample_idx) {
      if (set->y(sample_idx) == 1.0) ++cases;
    }
    set->case_count = cases;
    set->control_count = sample_count - cases;
    if (cases == 0 || cases == sample_count) {
      throw Error(ExitCode::model, column_place(table, set->trait),
                  "the binary trait " + quote(set->trait) + " has " + std::to_string(cases) +
                      " cases and " + std::to_string(set->control_count) +
                      " controls among the " + std::to_string(sample_count) +
                      " analysis samples; both are needed",
                  "check the trait coding (1 = case, 0 = control) and which samples are "
                  "dropped for missing values");
    }
    return;
  }
  if (set->y.maxCoeff() == set->y.minCoeff()) {
    throw Error(ExitCode::model, column_place(table, set->trait),
                "the trait " + quote(set->trait) + " has the same value (" +
                    format_value(set->y(0)) + ") in all " + std::to_string(sample_count) +
                    " analysis samples",
                "check the trait column and which samples are dropped for missing values");
  }
}

// The reference is the most frequent level; ties go to the level that sorts
// first, so the coding does not depend on row order.
std::map<std::string, std::size_t> count_levels(const TableColumn& covariate,
                                                const std::vector<std::size_t>& rows) {
  std::map<std::string, std::size_t> counts;
  for (std::size_t row_idx : rows) ++counts[covariate.tokens[row_idx]];
  return counts;
}

std::string choose_reference_level(const std::map<std::string, std::size_t>& counts) {
  std::string reference;
  std::size_t reference_count = 0;
  for (const auto& [level, count] : counts) {
    if (count > reference_count) {
      reference = level;
      reference_count = count;
    }
  }
  return reference;
}

// One design block: its column names and, per analysis sample, its values.
struct DesignBlock {
  std::vector<std::string> names;
  std::vector<std::vector<double>> columns;
};

DesignBlock encode_numeric(const TableColumn& covariate, const std::vector<std::size_t>& rows) {
  DesignBlock block;
  block.names.push_back(covariate.name);
  std::vector<double> values;
  values.reserve(rows.size());
  for (std::size_t row_idx : rows) values.push_back(covariate.values[row_idx]);
  block.columns.push_back(std::move(values));
  return block;
}

DesignBlock encode_levels(const TableColumn& covariate, const std::vector<std::size_t>& rows,
                          AnalysisSet* set) {
  const std::map<std::string, std::size_t> counts = count_levels(covariate, rows);
  const std::string reference = choose_reference_level(counts);
  set->reference_levels[covariate.name] = reference;
  DesignBlock block;
  for (const auto& entry : counts) {
    const std::string& level = entry.first;
    if (level == reference) continue;
    block.names.push_back(covariate.name + "=" + level);
    std::vector<double> indicator;
    indicator.reserve(rows.size());
    for (std::size_t row_idx : rows) indicator.push_back(covariate.tokens[row_idx] == level ? 1.0 : 0.0);
    block.columns.push_back(std::move(indicator));
  }
  return block;
}

void build_design(const std::vector<const TableColumn*>& covariates,
                  const std::vector<std::size_t>& rows, AnalysisSet* set) {
  std::vector<DesignBlock> blocks;
  std::size_t column_count = 1;
  for (const TableColumn* covariate : covariates) {
    blocks.push_back(covariate->numeric ? encode_numeric(*covariate, rows)
                                        : encode_levels(*covariate, rows, set));
    column_count += blocks.back().names.size();
  }
  const auto sample_count = static_cast<Eigen::Index>(rows.size());
  set->design.resize(sample_count, static_cast<Eigen::Index>(column_count));
  set->design.col(0).setOnes();
  set->design_names.assign(1, "intercept");
  Eigen::Index design_column = 1;
  for (const DesignBlock& block : blocks) {
    for (std::size_t block_column = 0; block_column < block.names.size(); ++block_column) {
      set->design_names.push_back(block.names[block_column]);
      const std::vector<double>& values = block.columns[block_column];
      for (Eigen::Index sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
        set->design(sample_idx, design_column) = values[static_cast<std::size_t>(sample_idx)];
      }
      ++design_column;
    }
  }
}

}  // namespace

AnalysisSet build_analysis_set(const TraitTable& table,
                               const std::vector<std::string>& genotype_samples,
                               const AnalysisRequest& request) {
  check_request(request);
  const TableColumn& trait = find_trait_column(table, request.trait);
  std::vector<const TableColumn*> covariates;
  covariates.reserve(request.covariates.size());
  for (const std::string& name : request.covariates) covariates.push_back(&table.column(name));

  AnalysisSet set;
  set.trait = request.trait;
  const SampleMatch match = match_samples(table, genotype_samples, &set.accounting);
  const std::vector<std::size_t> rows =
      select_complete_samples(table, match, trait, covariates, request.excluded_samples, &set);
  set.kind = decide_trait_kind(table, trait, rows, request.kind_override);
  fill_trait(trait, rows, &set);
  check_trait_varies(table, &set);
  build_design(covariates, rows, &set);
  return set;
}

}  // namespace tamis
