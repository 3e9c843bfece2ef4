// Fuzz target: the trait and covariate table parser (TraitTable::load) and,
// for tables it accepts, sample matching and covariate encoding
// (build_analysis_set). A tamis::Error is the expected answer to bad input;
// a crash, a sanitizer report, a leak, a hang or any other exception is a bug.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "fuzz_input_file.hpp"
#include "tamis/errors.hpp"
#include "tamis/trait_table.hpp"

namespace tamis::fuzzing {
namespace {

constexpr std::size_t kTraitsTried = 4;
constexpr std::size_t kCovariatesUsed = 3;

void check_column_shapes(const TraitTable& table) {
  for (const std::string& name : table.column_names()) {
    const TableColumn& column = table.column(name);
    const std::size_t stored = column.numeric ? column.values.size() : column.tokens.size();
    if (stored != table.row_count() || column.missing.size() != table.row_count()) {
      report_broken_invariant("a column does not hold one value per row");
    }
  }
  if (table.line_numbers().size() != table.row_count()) {
    report_broken_invariant("line_numbers() does not give one line per row");
  }
}

void check_analysis_set(const AnalysisSet& set, std::size_t genotype_sample_count) {
  const auto sample_count = static_cast<std::size_t>(set.y.size());
  if (set.genotype_index.size() != sample_count || static_cast<std::size_t>(set.design.rows()) != sample_count ||
      static_cast<std::size_t>(set.design.cols()) != set.design_names.size()) {
    report_broken_invariant("the analysis set's trait, design and names disagree in size");
  }
  for (std::size_t sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
    if (set.genotype_index[sample_idx] >= genotype_sample_count ||
        (sample_idx > 0 && set.genotype_index[sample_idx] <= set.genotype_index[sample_idx - 1])) {
      report_broken_invariant("genotype_index is not ascending within the genotype samples");
    }
  }
  if (!set.y.allFinite() || !set.design.allFinite()) report_broken_invariant("a non-finite value reached the model");
}

// Genotype samples that share some IDs with the table, in another order, so
// that matching has something to do.
std::vector<std::string> genotype_samples_for(const TraitTable& table) {
  std::vector<std::string> samples(table.sample_ids().rbegin(), table.sample_ids().rend());
  if (samples.size() > 1) samples.erase(samples.begin());
  samples.push_back("not-in-the-table");
  return samples;
}

void analyse_each_column(const TraitTable& table) {
  const std::vector<std::string> names = table.column_names();
  const std::vector<std::string> genotype_samples = genotype_samples_for(table);
  for (std::size_t trait_idx = 0; trait_idx < names.size() && trait_idx < kTraitsTried; ++trait_idx) {
    AnalysisRequest request;
    request.trait = names[trait_idx];
    for (std::size_t column_idx = 0; column_idx < names.size(); ++column_idx) {
      if (column_idx != trait_idx && request.covariates.size() < kCovariatesUsed) {
        request.covariates.push_back(names[column_idx]);
      }
    }
    if (trait_idx % 2 == 1) request.kind_override = TraitKind::binary;
    try {
      check_analysis_set(build_analysis_set(table, genotype_samples, request), genotype_samples.size());
    } catch (const Error&) {
    }
  }
}

}  // namespace
}  // namespace tamis::fuzzing

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace tamis;
  static const fuzzing::FuzzInputFile input(".tsv");
  input.write(data, size);
  try {
    const TraitTable table = TraitTable::load(input.path(), TableOptions{});
    fuzzing::check_column_shapes(table);
    fuzzing::analyse_each_column(table);
    try {
      table.column("no\nsuch column");  // a header field cannot hold a line break
      fuzzing::report_broken_invariant("column() found a column that does not exist");
    } catch (const Error&) {
    }
  } catch (const Error&) {
  }
  return 0;
}
