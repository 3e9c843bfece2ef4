// Region text as users write it: "CHR", "CHR:FROM-TO", "CHR:FROM-", "CHR:POS".
#include <cstdint>
#include <limits>
#include <optional>

#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis {

namespace {

constexpr const char* region_forms =
    "write CHR, CHR:FROM-TO, CHR:FROM- or CHR:POS with 1-based positions, e.g. "
    "chr2:1,000,000-2,000,000";

[[noreturn]] void throw_region_error(const std::string& text, const std::string& what) {
  throw Error(ExitCode::usage, "region '" + text + "'", what, region_forms);
}

// Digits with optional thousands separators; nothing when the text is not
// such a number or does not fit in 63 bits.
std::optional<std::int64_t> parse_position(const std::string& text) {
  std::int64_t value = 0;
  bool any_digit = false;
  for (char letter : text) {
    if (letter == ',') continue;
    if (letter < '0' || letter > '9') return std::nullopt;
    const int digit = letter - '0';
    if (value > (std::numeric_limits<std::int64_t>::max() - digit) / 10) return std::nullopt;
    value = value * 10 + digit;
    any_digit = true;
  }
  if (!any_digit || text.front() == ',' || text.back() == ',') return std::nullopt;
  return value;
}

std::int64_t require_position(const std::string& region_text, const std::string& number_text,
                              const char* role) {
  std::optional<std::int64_t> position = parse_position(number_text);
  if (!position) {
    throw_region_error(region_text, std::string("the ") + role + " position '" + number_text +
                                        "' is not a whole number");
  }
  if (*position < 1) {
    throw_region_error(region_text, std::string("the ") + role + " position must be 1 or more");
  }
  return *position;
}

}  // namespace

GenomicRegion parse_region(const std::string& text) {
  GenomicRegion region;
  const std::size_t colon = text.rfind(':');
  region.contig = text.substr(0, colon);
  if (region.contig.empty()) throw_region_error(text, "the contig name is missing");
  for (char letter : region.contig) {
    if (letter == ' ' || letter == '\t' || letter == '\n') {
      throw_region_error(text, "the contig name holds white space");
    }
  }
  if (colon == std::string::npos) return region;

  const std::string span = text.substr(colon + 1);
  if (span.empty()) throw_region_error(text, "nothing follows the ':'");
  const std::size_t dash = span.find('-');
  if (dash == std::string::npos) {
    region.first = require_position(text, span, "start");
    region.last = region.first;
    return region;
  }
  region.first = require_position(text, span.substr(0, dash), "start");
  const std::string end_text = span.substr(dash + 1);
  if (!end_text.empty()) region.last = require_position(text, end_text, "end");
  if (region.last < region.first) {
    throw_region_error(text, "the end position comes before the start position");
  }
  return region;
}

}  // namespace tamis
