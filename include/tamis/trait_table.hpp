// The trait and covariate table: parsing, sample matching and covariate
// encoding. No statistics here beyond encoding: the null model decides what
// is collinear.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "tamis/types.hpp"

namespace tamis {

struct TableOptions {
  std::string sample_column;  // empty: the first column
  std::vector<std::string> missing_tokens{"NA", "na", "NaN", ".", ""};
};

// One parsed column. Numeric columns hold values (NaN = missing); text
// columns hold their raw tokens ("" = missing).
struct TableColumn {
  std::string name;
  bool numeric = true;
  std::vector<double> values;
  std::vector<std::string> tokens;
  std::vector<bool> missing;
};

class TraitTable {
 public:
  // Reads a tab- or comma-separated table (the header line decides; a tab
  // wins). Accepts CRLF, a UTF-8 BOM, trailing whitespace and a last line
  // without newline. Throws tamis::Error (ExitCode::table_input) naming the
  // file and line for: a missing file, a row with the wrong field count,
  // duplicate sample IDs (both lines named), an empty table, and a mostly
  // numeric column with stray text (line, column and token named).
  static TraitTable load(const std::string& path, const TableOptions& options);

  const std::string& path() const { return path_; }
  const std::string& sample_column_name() const { return sample_column_; }
  const std::vector<std::string>& sample_ids() const { return sample_ids_; }
  std::size_t row_count() const { return sample_ids_.size(); }
  // 1-based line number in the file of each data row (for messages).
  const std::vector<std::size_t>& line_numbers() const { return line_numbers_; }
  std::vector<std::string> column_names() const;  // every column but the sample column

  // Throws tamis::Error (table_input) listing the columns that exist.
  const TableColumn& column(const std::string& name) const;

 private:
  std::string path_;
  std::string sample_column_;
  std::vector<std::string> sample_ids_;
  std::vector<std::size_t> line_numbers_;
  std::vector<TableColumn> columns_;
};

struct AnalysisRequest {
  std::string trait;
  std::optional<TraitKind> kind_override;
  std::vector<std::string> covariates;
  // Genotype samples left out by --keep-samples / --drop-samples (empty: none),
  // indexed like the genotype files' samples.
  std::vector<bool> excluded_samples;
};

// Who was used and who was dropped, and why.
struct SampleAccounting {
  std::size_t genotype_samples = 0;    // samples in the genotype files
  std::size_t table_rows = 0;          // data rows in the table
  std::size_t matched = 0;             // in both
  std::size_t excluded_by_list = 0;    // matched, left out by --keep-samples / --drop-samples
  std::size_t genotype_only = 0;       // in the genotype files but not the table
  std::size_t table_only = 0;          // in the table but not the genotype files
  std::size_t missing_trait = 0;       // matched, trait missing
  std::size_t missing_covariate = 0;   // matched, trait present, a covariate missing
  std::size_t analysed = 0;            // the analysis samples
};

struct AnalysisSet {
  std::string trait;
  TraitKind kind = TraitKind::quantitative;
  // Positions of the analysis samples in the genotype files' sample order,
  // ascending. Row k of y and design belongs to genotype sample genotype_index[k].
  std::vector<std::size_t> genotype_index;
  Eigen::VectorXd y;
  // Intercept first, then each covariate in the order requested; a text
  // covariate becomes indicator columns "NAME=LEVEL" against its most frequent
  // level (ties: the level that sorts first).
  Eigen::MatrixXd design;
  std::vector<std::string> design_names;
  std::map<std::string, std::string> reference_levels;  // text covariate -> its reference level
  SampleAccounting accounting;
  std::size_t case_count = 0;     // binary traits
  std::size_t control_count = 0;  // binary traits
};

// A trait whose non-missing values are exactly {0,1} is binary, else
// quantitative, unless overridden. Throws tamis::Error for: an unknown trait
// or covariate column (table_input, lists the columns); a text trait
// (table_input); no sample overlap (table_input, shows a few IDs from each
// side); an override to binary of a trait not coded 0/1, a constant trait, or
// a binary trait without cases or without controls among the analysis
// samples (model).
AnalysisSet build_analysis_set(const TraitTable& table,
                               const std::vector<std::string>& genotype_samples,
                               const AnalysisRequest& request);

}  // namespace tamis
