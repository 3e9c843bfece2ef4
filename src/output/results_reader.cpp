// Reads results files back through zlib: BGZF is a series of gzip members,
// which gzread decodes as one stream, and a plain text file passes through.
#include "tamis/results_reader.hpp"

#include <zlib.h>

#include <algorithm>
#include <cerrno>
#include <charconv>
#include <cstring>
#include <string>

#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {

namespace {

constexpr std::size_t read_chunk_bytes = 1 << 16;
constexpr std::string_view missing_token = "#NA";

std::string quoted(std::string_view text) {
  constexpr std::size_t longest_shown = 40;
  std::string shown(text.substr(0, longest_shown));
  if (text.size() > longest_shown) shown += "...";
  return "'" + shown + "'";
}

std::string joined(const std::vector<std::string>& names) {
  std::string text;
  for (const std::string& name : names) {
    if (!text.empty()) text += ", ";
    text += name;
  }
  return text;
}

}  // namespace

struct ResultsReader::Impl {
  gzFile file = nullptr;
  std::string line;
  std::vector<char> chunk = std::vector<char>(read_chunk_bytes);

  ~Impl() {
    if (file) gzclose(file);
  }
};

ResultsReader::ResultsReader(std::string path) : ResultsReader(std::move(path), result_columns()) {}

ResultsReader::ResultsReader(std::string path, std::vector<std::string> required_columns)
    : impl_(std::make_unique<Impl>()), path_(std::move(path)), required_(std::move(required_columns)) {
  impl_->file = gzopen(path_.c_str(), "rb");
  if (!impl_->file) {
    throw Error(ExitCode::results_input, path_,
                std::string("cannot open the results file: ") + std::strerror(errno),
                "check the path; results files are named PREFIX.TRAIT.tsv.gz");
  }
  gzbuffer(impl_->file, 1 << 17);
  read_header();
}

ResultsReader::~ResultsReader() = default;

std::string ResultsReader::place() const {
  return path_ + ", line " + std::to_string(line_number_);
}

// Reads one line into impl_->line without its line ending; false at the end.
bool ResultsReader::read_line() {
  std::string& line = impl_->line;
  line.clear();
  bool read_any = false;
  while (true) {
    char* got = gzgets(impl_->file, impl_->chunk.data(), static_cast<int>(impl_->chunk.size()));
    if (!got) break;
    read_any = true;
    std::size_t length = std::strlen(got);
    line.append(got, length);
    if (length > 0 && got[length - 1] == '\n') break;
  }
  int error_number = Z_OK;
  const char* message = gzerror(impl_->file, &error_number);
  if (error_number != Z_OK && error_number != Z_STREAM_END) {
    throw Error(ExitCode::results_input, path_ + ", after line " + std::to_string(line_number_),
                std::string("the compressed data is damaged or cut short (") + message + ")",
                "the file may be incomplete; rerun the scan that wrote it or copy it again");
  }
  if (!read_any) return false;
  ++line_number_;
  if (!line.empty() && line.back() == '\n') line.pop_back();
  if (!line.empty() && line.back() == '\r') line.pop_back();
  return true;
}

void ResultsReader::split_fields() {
  field_starts_.clear();
  field_ends_.clear();
  const std::string& line = impl_->line;
  std::size_t start = 0;
  while (true) {
    std::size_t tab = line.find('\t', start);
    field_starts_.push_back(start);
    if (tab == std::string::npos) {
      field_ends_.push_back(line.size());
      break;
    }
    field_ends_.push_back(tab);
    start = tab + 1;
  }
}

void ResultsReader::read_header() {
  if (!read_line()) {
    throw Error(ExitCode::results_input, path_, "the file is empty; a header line was expected",
                "the scan that wrote it may have failed; check its log");
  }
  split_fields();
  for (std::size_t column = 0; column < field_starts_.size(); ++column) {
    header_.emplace_back(field(column));
  }
  std::vector<std::string> missing;
  for (const std::string& name : required_) {
    if (std::find(header_.begin(), header_.end(), name) == header_.end()) missing.push_back(name);
  }
  if (!missing.empty()) {
    throw Error(ExitCode::results_input, place(),
                "the header lacks the column" + std::string(missing.size() > 1 ? "s " : " ") +
                    joined(missing),
                "give a results file written by tamis scan (tab-separated, with a header line "
                "naming every results column)");
  }
}

bool ResultsReader::next_row() {
  if (!read_line()) return false;
  split_fields();
  if (field_starts_.size() != header_.size()) {
    throw Error(ExitCode::results_input, place(),
                "found " + std::to_string(field_starts_.size()) + " tab-separated fields, expected " +
                    std::to_string(header_.size()) + " as in the header",
                "the line is damaged or the file was edited; fields are separated by single tabs "
                "and a missing value is written #NA");
  }
  return true;
}

std::size_t ResultsReader::column_index(std::string_view name) const {
  bool required = std::find(required_.begin(), required_.end(), name) != required_.end();
  auto found = std::find(header_.begin(), header_.end(), name);
  if (!required || found == header_.end()) {
    throw Error(ExitCode::internal, path_,
                "column " + std::string(name) + " was asked for but not declared as required");
  }
  return static_cast<std::size_t>(found - header_.begin());
}

std::string_view ResultsReader::line() const { return impl_->line; }

std::string_view ResultsReader::field(std::size_t column) const {
  std::string_view line(impl_->line);
  return line.substr(field_starts_[column], field_ends_[column] - field_starts_[column]);
}

bool ResultsReader::is_missing(std::size_t column) const { return field(column) == missing_token; }

void ResultsReader::throw_bad_field(std::size_t column, const std::string& expected) const {
  throw Error(ExitCode::results_input, place() + ", column " + header_[column],
              "expected " + expected + ", found " + quoted(field(column)),
              "the line is damaged or the file was edited; restore it from the scan's output");
}

double ResultsReader::number(std::size_t column) const {
  std::string_view text = field(column);
  double value = 0.0;
  auto [end, error] = std::from_chars(text.data(), text.data() + text.size(), value);
  if (text.empty() || error != std::errc() || end != text.data() + text.size()) {
    throw_bad_field(column, "a number");
  }
  return value;
}

std::optional<double> ResultsReader::optional_number(std::size_t column) const {
  if (is_missing(column)) return std::nullopt;
  return number(column);
}

std::int64_t ResultsReader::integer(std::size_t column) const {
  std::string_view text = field(column);
  std::int64_t value = 0;
  auto [end, error] = std::from_chars(text.data(), text.data() + text.size(), value);
  if (text.empty() || error != std::errc() || end != text.data() + text.size()) {
    throw_bad_field(column, "a whole number");
  }
  return value;
}

}  // namespace tamis
