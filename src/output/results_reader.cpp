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
  // Decompressed bytes not yet handed out as lines: chunk[chunk_next, chunk_end).
  // Lines are cut here rather than by gzgets, whose C string cannot tell a
  // NUL byte inside a line from the end of the text read.
  std::vector<char> chunk = std::vector<char>(read_chunk_bytes);
  std::size_t chunk_next = 0;
  std::size_t chunk_end = 0;

  ~Impl() {
    if (file) gzclose(file);
  }

  // Decompresses the next bytes into the chunk; false at the end of the data.
  bool refill_chunk(const std::string& path, std::size_t lines_read) {
    const int got = gzread(file, chunk.data(), static_cast<unsigned>(chunk.size()));
    throw_if_damaged(path, lines_read);
    chunk_next = 0;
    chunk_end = got > 0 ? static_cast<std::size_t>(got) : 0;
    return chunk_end > 0;
  }

  // Moves the chunk's bytes up to and including the next line end onto
  // `line`; true when the line end was among them.
  bool take_line_piece() {
    const char* start = chunk.data() + chunk_next;
    const std::size_t available = chunk_end - chunk_next;
    const char* line_end = static_cast<const char*>(std::memchr(start, '\n', available));
    const std::size_t taken = line_end ? static_cast<std::size_t>(line_end - start) + 1 : available;
    line.append(start, taken);
    chunk_next += taken;
    return line_end != nullptr;
  }

  // zlib reports a cut-short stream (Z_BUF_ERROR) like damaged data; both
  // mean the file cannot be trusted past the lines already read.
  void throw_if_damaged(const std::string& path, std::size_t lines_read) const {
    int error_number = Z_OK;
    const char* message = gzerror(file, &error_number);
    if (error_number == Z_OK || error_number == Z_STREAM_END) return;
    throw Error(ExitCode::results_input, path + ", after line " + std::to_string(lines_read),
                std::string("the compressed data is damaged or cut short (") + message + ")",
                "the file may be incomplete; rerun the scan that wrote it or copy it again");
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
  Impl& impl = *impl_;
  impl.line.clear();
  bool read_any = false;
  while (true) {
    if (impl.chunk_next == impl.chunk_end && !impl.refill_chunk(path_, line_number_)) break;
    read_any = true;
    if (impl.take_line_piece()) break;
  }
  if (!read_any) return false;
  ++line_number_;
  std::string& line = impl.line;
  if (!line.empty() && line.back() == '\n') line.pop_back();
  if (!line.empty() && line.back() == '\r') line.pop_back();
  check_no_nul_byte();
  return true;
}

// A results file is text: a NUL byte means damage (a crash that left
// zero-filled blocks, a bad copy), and a field handed on as a C string would
// be cut short at it without a word.
void ResultsReader::check_no_nul_byte() const {
  const std::size_t nul = impl_->line.find('\0');
  if (nul == std::string::npos) return;
  throw Error(ExitCode::results_input, place() + ", byte " + std::to_string(nul + 1),
              "found a NUL byte where a results file holds only text",
              "the file is damaged; rerun the scan that wrote it or copy it again");
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
