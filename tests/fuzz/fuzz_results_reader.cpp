// Fuzz target: the results-file reader (ResultsReader), which the report
// command uses on finished scans. The first input byte is a set of switches:
//   bit 0  put tamis's own header line before the rest, so that rows are reached
//   bit 1  gzip the file (the reader takes BGZF, gzip or plain text)
//   bit 2  require only two columns instead of every results column
// A tamis::Error is the expected answer to bad input; a crash, a sanitizer
// report, a leak, a hang or any other exception is a bug.
#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "fuzz_input_file.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_reader.hpp"
#include "tamis/results_writer.hpp"

namespace tamis::fuzzing {
namespace {

constexpr std::uint8_t kWithHeader = 1;
constexpr std::uint8_t kGzipped = 2;
constexpr std::uint8_t kFewColumns = 4;
constexpr std::size_t kRowsRead = 200;

// Every typed accessor on every field: each either answers or throws tamis::Error.
void read_fields(const ResultsReader& reader) {
  for (std::size_t column = 0; column < reader.header().size(); ++column) {
    const std::string_view text = reader.field(column);
    if (text.find('\t') != std::string_view::npos) report_broken_invariant("a field holds a tab");
    const bool missing = reader.is_missing(column);
    try {
      const std::optional<double> number = reader.optional_number(column);
      if (number.has_value() == missing) report_broken_invariant("optional_number disagrees with is_missing");
    } catch (const Error&) {
    }
    try {
      reader.number(column);
    } catch (const Error&) {
    }
    try {
      reader.integer(column);
    } catch (const Error&) {
    }
  }
}

void read_results(const std::string& path, bool few_columns) {
  std::unique_ptr<ResultsReader> reader =
      few_columns ? std::make_unique<ResultsReader>(path, std::vector<std::string>{"chromosome", "p_value"})
                  : std::make_unique<ResultsReader>(path);
  const std::vector<std::string> required =
      few_columns ? std::vector<std::string>{"chromosome", "p_value"} : result_columns();
  for (const std::string& name : required) {
    if (reader->header()[reader->column_index(name)] != name) {
      report_broken_invariant("column_index points at another column");
    }
  }
  for (std::size_t row_idx = 0; row_idx < kRowsRead && reader->next_row(); ++row_idx) {
    if (reader->line_number() != row_idx + 2) report_broken_invariant("line numbers do not count lines");
    read_fields(*reader);
  }
}

}  // namespace
}  // namespace tamis::fuzzing

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace tamis;
  if (size == 0) return 0;
  static const fuzzing::FuzzInputFile input(".tsv.gz");
  const std::uint8_t switches = data[0];
  std::string text(reinterpret_cast<const char*>(data + 1), size - 1);
  if (switches & fuzzing::kWithHeader) text = result_header_line() + text;
  if (switches & fuzzing::kGzipped) {
    input.write_gzip(text);
  } else {
    input.write(text);
  }
  try {
    fuzzing::read_results(input.path(), switches & fuzzing::kFewColumns);
  } catch (const Error&) {
  }
  return 0;
}
