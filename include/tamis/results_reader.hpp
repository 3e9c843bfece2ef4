// Results in: reads a tamis results file (PREFIX.TRAIT.tsv.gz, BGZF or plain
// text) back line by line, for the commands that work on finished scans
// (report, and later merge and confirm). Only the current line is held.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace tamis {

class ResultsReader {
 public:
  // Opens `path` and checks its header line against `required_columns`
  // (default: every column tamis writes, see result_columns()). Columns are
  // found by name, so extra columns are allowed. Throws tamis::Error
  // (results_input) when the file cannot be opened, is empty, or lacks a
  // required column.
  explicit ResultsReader(std::string path);
  ResultsReader(std::string path, std::vector<std::string> required_columns);
  ~ResultsReader();
  ResultsReader(const ResultsReader&) = delete;
  ResultsReader& operator=(const ResultsReader&) = delete;

  // Moves to the next data line; false at the end of the file. Throws when a
  // line has the wrong number of fields or holds a NUL byte, or the file is
  // damaged.
  bool next_row();

  // Where a column sits in the header; throws (internal) for a column that
  // was not among the required ones, since asking for it is a coding mistake.
  std::size_t column_index(std::string_view name) const;

  // The current data line without its line end (valid until next_row()).
  std::string_view line() const;
  // The raw text of a field in the current line (valid until next_row()).
  std::string_view field(std::size_t column) const;
  bool is_missing(std::size_t column) const;  // "#NA"

  // Typed fields. Each throws tamis::Error (results_input) naming the file,
  // the line and the column when the text is not a number of that kind.
  double number(std::size_t column) const;                   // "#NA" is an error
  std::optional<double> optional_number(std::size_t column) const;  // "#NA" is empty
  std::int64_t integer(std::size_t column) const;

  std::size_t line_number() const { return line_number_; }  // 1-based; the header is line 1
  const std::string& path() const { return path_; }
  const std::vector<std::string>& header() const { return header_; }
  std::string place() const;  // "FILE, line N" for error messages

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::string path_;
  std::vector<std::string> header_;
  std::vector<std::string> required_;
  std::vector<std::size_t> field_starts_;
  std::vector<std::size_t> field_ends_;
  std::size_t line_number_ = 0;

  bool read_line();
  void check_no_nul_byte() const;
  void split_fields();
  void read_header();
  [[noreturn]] void throw_bad_field(std::size_t column, const std::string& expected) const;
};

}  // namespace tamis
