// Reading the trait and covariate table.
//
// The file is read twice: the first pass checks the shape, collects the
// sample IDs and decides each column's type; the second pass stores the
// values. Holding only the typed values (not every raw token) keeps memory
// small for tables with a million rows and dozens of columns.

#include <cmath>
#include <cstdlib>
#include <fstream>
#include <functional>
#include <limits>
#include <set>
#include <string>
#include <unordered_map>
#include <vector>

#include "tamis/errors.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {
namespace {

constexpr std::size_t kMaxListedColumns = 30;

std::string quote(const std::string& text) { return "\"" + text + "\""; }

std::string describe_place(const std::string& path, std::size_t line_number) {
  return path + ", line " + std::to_string(line_number);
}

std::string list_names(const std::vector<std::string>& names) {
  std::string listed;
  for (std::size_t name_idx = 0; name_idx < names.size() && name_idx < kMaxListedColumns;
       ++name_idx) {
    if (name_idx > 0) listed += ", ";
    listed += names[name_idx];
  }
  if (names.size() > kMaxListedColumns) {
    listed += ", ... (" + std::to_string(names.size() - kMaxListedColumns) + " more)";
  }
  return listed;
}

bool is_padding(char character, char delimiter) {
  // A tab separates fields in a TSV file, so only there is it not padding.
  return character == ' ' || (character == '\t' && delimiter != '\t');
}

// True for lines that hold nothing but spaces, tabs and delimiters: blank
// lines and the empty rows spreadsheets leave at the end of an export.
// Before the header is read the delimiter is unknown (0).
bool is_blank_line(const std::string& line, char delimiter) {
  for (char character : line) {
    if (character != ' ' && character != '\t' && character != delimiter) return false;
  }
  return true;
}

// Splits one line into fields. Double-quoted fields may hold the delimiter
// and "" for a quote; they cannot span lines.
std::vector<std::string> split_fields(const std::string& line, char delimiter,
                                      const std::string& path, std::size_t line_number) {
  std::vector<std::string> fields;
  std::size_t position = 0;
  const std::size_t length = line.size();
  while (true) {
    while (position < length && is_padding(line[position], delimiter)) ++position;
    std::string field;
    if (position < length && line[position] == '"') {
      const std::size_t quote_column = fields.size() + 1;
      ++position;
      bool closed = false;
      while (position < length) {
        if (line[position] == '"') {
          if (position + 1 < length && line[position + 1] == '"') {
            field += '"';
            position += 2;
            continue;
          }
          ++position;
          closed = true;
          break;
        }
        field += line[position++];
      }
      if (!closed) {
        throw Error(ExitCode::table_input, describe_place(path, line_number),
                    "field " + std::to_string(quote_column) +
                        " opens a double quote that is not closed on the same line",
                    "close the quote; a quoted field cannot continue onto the next line, and "
                    "a quote inside a quoted field is written as \"\"");
      }
      while (position < length && is_padding(line[position], delimiter)) ++position;
      if (position < length && line[position] != delimiter) {
        throw Error(ExitCode::table_input, describe_place(path, line_number),
                    "field " + std::to_string(quote_column) +
                        " has text after its closing double quote",
                    "quote the whole field, writing a quote inside it as \"\"");
      }
    } else {
      const std::size_t start = position;
      while (position < length && line[position] != delimiter) ++position;
      std::size_t end = position;
      while (end > start && is_padding(line[end - 1], delimiter)) --end;
      field = line.substr(start, end - start);
    }
    fields.push_back(std::move(field));
    if (position >= length) break;
    ++position;  // past the delimiter; a delimiter at the very end leaves an empty last field
    if (position == length) {
      fields.emplace_back();
      break;
    }
  }
  return fields;
}

// Plain decimal numbers only: hexadecimal, "inf" and "nan" are not values a
// trait table should carry, so they are treated as text.
bool parse_number(const std::string& token, double* value) {
  if (token.empty()) return false;
  for (char character : token) {
    const bool allowed = (character >= '0' && character <= '9') || character == '.' ||
                         character == 'e' || character == 'E' || character == '+' ||
                         character == '-';
    if (!allowed) return false;
  }
  char* end = nullptr;
  const double parsed = std::strtod(token.c_str(), &end);
  if (end != token.c_str() + token.size() || !std::isfinite(parsed)) return false;
  *value = parsed;
  return true;
}

// Reads the file line by line, hands the header and then every data row to
// the callbacks, and checks that each row has as many fields as the header.
class LineReader {
 public:
  using HeaderCallback = std::function<void(std::vector<std::string>&, std::size_t)>;
  using RowCallback = std::function<void(std::vector<std::string>&, std::size_t)>;

  explicit LineReader(std::string path) : path_(std::move(path)) {}

  void read(const HeaderCallback& on_header, const RowCallback& on_row) {
    std::ifstream input(path_, std::ios::binary);
    if (!input) {
      throw Error(ExitCode::table_input, path_, "cannot open the trait table",
                  "check the path given to --traits and that the file is readable");
    }
    std::string line;
    std::size_t line_number = 0;
    std::size_t expected_fields = 0;
    bool header_seen = false;
    while (std::getline(input, line)) {
      ++line_number;
      if (line_number == 1) strip_byte_order_mark(&line);
      if (!line.empty() && line.back() == '\r') line.pop_back();
      if (is_blank_line(line, header_seen ? delimiter_ : '\0')) continue;
      if (!header_seen) {
        delimiter_ = line.find('\t') != std::string::npos ? '\t' : ',';
        std::vector<std::string> header = split_fields(line, delimiter_, path_, line_number);
        expected_fields = header.size();
        header_seen = true;
        on_header(header, line_number);
        continue;
      }
      std::vector<std::string> fields = split_fields(line, delimiter_, path_, line_number);
      if (fields.size() != expected_fields) report_field_count(fields.size(), expected_fields, line_number);
      on_row(fields, line_number);
    }
    if (input.bad()) {
      throw Error(ExitCode::table_input, path_, "reading the trait table failed",
                  "check that the file is complete and the disk is readable");
    }
    if (!header_seen) {
      throw Error(ExitCode::table_input, path_, "the trait table is empty",
                  "give a file with a header line naming the columns and one row per sample");
    }
  }

  char delimiter() const { return delimiter_; }

 private:
  void strip_byte_order_mark(std::string* line) const {
    if (line->compare(0, 3, "\xEF\xBB\xBF") == 0) {
      line->erase(0, 3);
      return;
    }
    if (line->compare(0, 2, "\xFF\xFE") == 0 || line->compare(0, 2, "\xFE\xFF") == 0) {
      throw Error(ExitCode::table_input, describe_place(path_, 1),
                  "the trait table is encoded as UTF-16", "save the file as UTF-8 text");
    }
  }

  [[noreturn]] void report_field_count(std::size_t found, std::size_t expected,
                                       std::size_t line_number) const {
    const std::string delimiter_name = delimiter_ == '\t' ? "tab" : "comma";
    throw Error(ExitCode::table_input, describe_place(path_, line_number),
                "expected " + std::to_string(expected) + " fields (as in the header) but found " +
                    std::to_string(found) + " (" + delimiter_name + "-separated)",
                "give every row one value per header column, using a missing-value token for "
                "unknown values; quote fields that contain a " +
                    delimiter_name);
  }

  std::string path_;
  char delimiter_ = ',';
};

// What the first pass learns about one column.
struct ColumnSurvey {
  std::size_t non_missing = 0;
  std::size_t non_numeric = 0;
  std::size_t first_text_line = 0;
  std::string first_text_token;
};

class TableLoader {
 public:
  TableLoader(const std::string& path, const TableOptions& options)
      : path_(path), missing_tokens_(options.missing_tokens.begin(), options.missing_tokens.end()),
        requested_sample_column_(options.sample_column) {}

  void survey() {
    LineReader reader(path_);
    reader.read([this](std::vector<std::string>& header,
                       std::size_t line_number) { take_header(header, line_number); },
                [this](std::vector<std::string>& fields, std::size_t line_number) {
                  survey_row(fields, line_number);
                });
    if (sample_ids_.empty()) {
      throw Error(ExitCode::table_input, path_, "the trait table has a header but no data rows",
                  "add one row per sample below the header line");
    }
    decide_column_types();
  }

  void fill() {
    for (TableColumn& column : columns_) {
      if (column.numeric) {
        column.values.reserve(sample_ids_.size());
      } else {
        column.tokens.reserve(sample_ids_.size());
      }
      column.missing.reserve(sample_ids_.size());
    }
    LineReader reader(path_);
    reader.read(
        [this](std::vector<std::string>& header, std::size_t) {
          if (header != header_) report_changed_file();
        },
                [this](std::vector<std::string>& fields, std::size_t) { fill_row(fields); });
    const std::size_t filled_rows = columns_.empty() ? sample_ids_.size() : columns_[0].missing.size();
    if (filled_rows != sample_ids_.size()) report_changed_file();
  }

  std::string sample_column_name() const { return header_[sample_field_]; }
  std::vector<std::string>& sample_ids() { return sample_ids_; }
  std::vector<std::size_t>& line_numbers() { return line_numbers_; }
  std::vector<TableColumn>& columns() { return columns_; }

 private:
  [[noreturn]] void report_changed_file() const {
    throw Error(ExitCode::table_input, path_, "the trait table changed while it was being read",
                "run again once the file is no longer being written");
  }

  bool is_missing(const std::string& token) const { return missing_tokens_.count(token) > 0; }

  void take_header(std::vector<std::string>& header, std::size_t line_number) {
    header_ = header;
    std::unordered_map<std::string, std::size_t> seen;
    for (std::size_t field_idx = 0; field_idx < header_.size(); ++field_idx) {
      const std::string& name = header_[field_idx];
      if (name.empty()) {
        throw Error(ExitCode::table_input, describe_place(path_, line_number),
                    "header column " + std::to_string(field_idx + 1) + " has no name",
                    "give every column a name in the header line");
      }
      auto [previous, inserted] = seen.emplace(name, field_idx);
      if (!inserted) {
        throw Error(ExitCode::table_input, describe_place(path_, line_number),
                    "the column name " + quote(name) + " appears twice (columns " +
                        std::to_string(previous->second + 1) + " and " +
                        std::to_string(field_idx + 1) + ")",
                    "rename one of the two columns");
      }
    }
    sample_field_ = find_sample_field(line_number);
    for (std::size_t field_idx = 0; field_idx < header_.size(); ++field_idx) {
      if (field_idx == sample_field_) continue;
      TableColumn column;
      column.name = header_[field_idx];
      columns_.push_back(std::move(column));
      column_fields_.push_back(field_idx);
    }
    surveys_.resize(columns_.size());
  }

  std::size_t find_sample_field(std::size_t line_number) const {
    if (requested_sample_column_.empty()) return 0;
    for (std::size_t field_idx = 0; field_idx < header_.size(); ++field_idx) {
      if (header_[field_idx] == requested_sample_column_) return field_idx;
    }
    throw Error(ExitCode::table_input, describe_place(path_, line_number),
                "no column named " + quote(requested_sample_column_) +
                    " for the sample IDs; the columns are: " + list_names(header_),
                "pass one of these names to --sample-column (names are case-sensitive)");
  }

  void survey_row(const std::vector<std::string>& fields, std::size_t line_number) {
    record_sample_id(fields[sample_field_], line_number);
    for (std::size_t column_idx = 0; column_idx < columns_.size(); ++column_idx) {
      const std::string& token = fields[column_fields_[column_idx]];
      if (is_missing(token)) continue;
      ColumnSurvey& survey = surveys_[column_idx];
      ++survey.non_missing;
      double value = 0.0;
      if (parse_number(token, &value)) continue;
      if (survey.non_numeric == 0) {
        survey.first_text_line = line_number;
        survey.first_text_token = token;
      }
      ++survey.non_numeric;
    }
  }

  void record_sample_id(const std::string& sample_id, std::size_t line_number) {
    if (sample_id.empty()) {
      throw Error(ExitCode::table_input, describe_place(path_, line_number),
                  "the sample ID in column " + quote(header_[sample_field_]) + " is empty",
                  "fill in the sample ID or delete the row");
    }
    auto [previous, inserted] = first_line_of_id_.emplace(sample_id, line_number);
    if (!inserted) {
      throw Error(ExitCode::table_input, describe_place(path_, line_number),
                  "the sample ID " + quote(sample_id) + " appears on line " +
                      std::to_string(previous->second) + " and again on line " +
                      std::to_string(line_number),
                  "keep one row per sample: merge or delete the duplicate row");
    }
    sample_ids_.push_back(sample_id);
    line_numbers_.push_back(line_number);
  }

  // All numbers: numeric. Half or more text: a text (categorical) column.
  // Otherwise the few text tokens are most likely typos or unlisted
  // missing-value codes, and guessing either way would silently change the
  // analysis.
  void decide_column_types() {
    for (std::size_t column_idx = 0; column_idx < columns_.size(); ++column_idx) {
      const ColumnSurvey& survey = surveys_[column_idx];
      if (survey.non_numeric == 0) continue;
      if (2 * survey.non_numeric >= survey.non_missing) {
        columns_[column_idx].numeric = false;
        continue;
      }
      report_stray_text(columns_[column_idx].name, survey);
    }
  }

  [[noreturn]] void report_stray_text(const std::string& column_name,
                                      const ColumnSurvey& survey) const {
    const std::size_t numeric_count = survey.non_missing - survey.non_numeric;
    std::string others;
    if (survey.non_numeric > 1) {
      others = " (" + std::to_string(survey.non_numeric - 1) + " more text values follow)";
    }
    throw Error(ExitCode::table_input, describe_place(path_, survey.first_text_line),
                "column " + quote(column_name) + " holds numbers (" +
                    std::to_string(numeric_count) + " values) but here has the text " +
                    quote(survey.first_text_token) + others,
                "correct the value, or if " + quote(survey.first_text_token) +
                    " marks a missing value add it to --missing-tokens");
  }

  void fill_row(const std::vector<std::string>& fields) {
    for (std::size_t column_idx = 0; column_idx < columns_.size(); ++column_idx) {
      const std::string& token = fields[column_fields_[column_idx]];
      TableColumn& column = columns_[column_idx];
      const bool missing = is_missing(token);
      column.missing.push_back(missing);
      if (column.numeric) {
        double value = std::numeric_limits<double>::quiet_NaN();
        if (!missing) parse_number(token, &value);
        column.values.push_back(value);
      } else {
        column.tokens.push_back(missing ? std::string() : token);
      }
    }
  }

  std::string path_;
  std::set<std::string> missing_tokens_;
  std::string requested_sample_column_;
  std::vector<std::string> header_;
  std::size_t sample_field_ = 0;
  std::vector<std::size_t> column_fields_;  // field position of each entry in columns_
  std::vector<TableColumn> columns_;
  std::vector<ColumnSurvey> surveys_;
  std::vector<std::string> sample_ids_;
  std::vector<std::size_t> line_numbers_;
  std::unordered_map<std::string, std::size_t> first_line_of_id_;
};

}  // namespace

TraitTable TraitTable::load(const std::string& path, const TableOptions& options) {
  TableLoader loader(path, options);
  loader.survey();
  loader.fill();
  TraitTable table;
  table.path_ = path;
  table.sample_column_ = loader.sample_column_name();
  table.sample_ids_ = std::move(loader.sample_ids());
  table.line_numbers_ = std::move(loader.line_numbers());
  table.columns_ = std::move(loader.columns());
  return table;
}

std::vector<std::string> TraitTable::column_names() const {
  std::vector<std::string> names;
  names.reserve(columns_.size());
  for (const TableColumn& column : columns_) names.push_back(column.name);
  return names;
}

const TableColumn& TraitTable::column(const std::string& name) const {
  for (const TableColumn& column : columns_) {
    if (column.name == name) return column;
  }
  std::string listed = columns_.empty() ? "(none besides the sample column " + quote(sample_column_) + ")"
                                        : list_names(column_names());
  throw Error(ExitCode::table_input, path_,
              "no column named " + quote(name) + "; the columns are: " + listed,
              "use one of these names (they are case-sensitive)");
}

}  // namespace tamis
