// Fuzz target: the relatedness-file reader (read_relatedness_files), which
// takes matrices made by tamis or by hand. The first input byte is a set of
// switches:
//   bit 0  put the header line sample_1, sample_2, relatedness before the rest
//   bit 1  gzip the file (the reader takes BGZF, gzip or plain text)
// A tamis::Error is the expected answer to bad input; a crash, a sanitizer
// report, a leak, a hang, any other exception or a matrix that breaks the
// reader's promises is a bug.
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <set>
#include <string>

#include "fuzz_input_file.hpp"
#include "tamis/errors.hpp"
#include "tamis/relatedness_file.hpp"

namespace tamis::fuzzing {
namespace {

constexpr std::uint8_t kWithHeader = 1;
constexpr std::uint8_t kGzipped = 2;

// What the reader promises of a matrix it accepts.
void check_contents(const RelatednessFileContents& contents) {
  const std::size_t ids = contents.sample_ids.size();
  if (contents.diagonal.size() != ids) report_broken_invariant("a diagonal value per ID");
  if (std::set<std::string>(contents.sample_ids.begin(), contents.sample_ids.end()).size() != ids) {
    report_broken_invariant("an ID listed twice");
  }
  for (double value : contents.diagonal) {
    if (!std::isnan(value) && !(value > 0.0 && std::isfinite(value))) report_broken_invariant("a diagonal value");
  }
  std::set<std::pair<std::uint32_t, std::uint32_t>> pairs;
  for (const RelatednessPair& pair : contents.pairs) {
    if (!(pair.first < pair.second && pair.second < ids)) report_broken_invariant("a pair's indices");
    if (!std::isfinite(pair.value) || pair.value == 0.0) report_broken_invariant("a pair's value");
    if (!pairs.insert({pair.first, pair.second}).second) report_broken_invariant("a pair listed twice");
  }
}

}  // namespace
}  // namespace tamis::fuzzing

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace tamis;
  if (size == 0) return 0;
  static const fuzzing::FuzzInputFile input(".tsv");
  const std::uint8_t switches = data[0];
  std::string text(reinterpret_cast<const char*>(data + 1), size - 1);
  if (switches & fuzzing::kWithHeader) text = "sample_1\tsample_2\trelatedness\n" + text;
  if (switches & fuzzing::kGzipped) {
    input.write_gzip(text);
  } else {
    input.write(text);
  }
  try {
    fuzzing::check_contents(read_relatedness_files({input.path()}));
  } catch (const Error&) {
  }
  return 0;
}
