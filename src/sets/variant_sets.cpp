// Variant-set definitions: the BED and list readers, the checks that name the
// file, line and column of a problem, and the index that answers "which sets
// take this variant" for every variant of a scan.
#include "tamis/variant_sets.hpp"

#include <zlib.h>

#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <cstdlib>
#include <numeric>
#include <tuple>
#include <unordered_map>
#include <utility>

#include "tamis/errors.hpp"

namespace tamis {

namespace {

constexpr std::int64_t largest_position = std::int64_t{1} << 52;

// Segment k is [breakpoints[k], breakpoints[k + 1]); the sets covering it
// are set_indices[offsets[k] .. offsets[k + 1]), in increasing order.
struct IntervalSegments {
  std::vector<std::int64_t> breakpoints;
  std::vector<std::size_t> offsets;
  std::vector<std::uint32_t> set_indices;
};

// A chr:pos:ref:alt entry of a list set, by reference: its alleles and weight
// stay in the set's definition.
struct AlleleEntryRef {
  std::int64_t position = 0;
  std::uint32_t set_index = 0;
  std::uint32_t entry_index = 0;
};
bool operator<(const AlleleEntryRef& left, const AlleleEntryRef& right) {
  return std::tie(left.position, left.set_index, left.entry_index) <
         std::tie(right.position, right.set_index, right.entry_index);
}
using MembersById = std::unordered_map<std::string, std::vector<SetMembership>>;

bool ends_with(const std::string& text, const std::string& suffix) {
  return text.size() >= suffix.size() && text.compare(text.size() - suffix.size(), suffix.size(), suffix) == 0;
}

std::string lower_case(std::string text) {
  for (char& letter : text) letter = static_cast<char>(std::tolower(static_cast<unsigned char>(letter)));
  return text;
}

std::string upper_case(std::string text) {
  for (char& letter : text) letter = static_cast<char>(std::toupper(static_cast<unsigned char>(letter)));
  return text;
}

std::string quote(const std::string& text) { return "'" + text + "'"; }

// Reads lines from a plain or gzip/BGZF file alike: zlib's gzread passes
// uncompressed input through unchanged.
class LineReader {
 public:
  explicit LineReader(const std::string& path) : path_(path), file_(gzopen(path.c_str(), "rb")) {
    if (!file_) {
      throw Error(ExitCode::usage, path, "cannot open the set file", "check the path given to --sets");
    }
    gzbuffer(file_, 1 << 17);
  }
  ~LineReader() { gzclose(file_); }
  LineReader(const LineReader&) = delete;
  LineReader& operator=(const LineReader&) = delete;

  // The next line without its line end (LF or CRLF); false at the end of the file.
  bool next(std::string& line) {
    line.clear();
    char buffer[1 << 14];
    bool complete = false;
    while (!complete && gzgets(file_, buffer, sizeof buffer)) {
      line += buffer;
      complete = line.back() == '\n';
    }
    if (!complete) {
      check_read();
      if (line.empty()) return false;
    }
    while (!line.empty() && (line.back() == '\n' || line.back() == '\r')) line.pop_back();
    ++line_number_;
    return true;
  }

  std::size_t line_number() const { return line_number_; }

 private:
  void check_read() const {
    int status = Z_OK;
    const char* message = gzerror(file_, &status);
    if (status == Z_OK || status == Z_STREAM_END) return;
    throw Error(ExitCode::usage, path_ + ", line " + std::to_string(line_number_ + 1),
                std::string("the file cannot be read to its end (") + message + ")",
                "the compressed file is damaged or cut short; compress the set file again");
  }

  std::string path_;
  gzFile file_;
  std::size_t line_number_ = 0;
};

// Fields separated by tabs or runs of spaces.
std::vector<std::string> split_fields(const std::string& line) {
  std::vector<std::string> fields;
  std::size_t position = 0;
  while (true) {
    position = line.find_first_not_of(" \t", position);
    if (position == std::string::npos) break;
    const std::size_t end = std::min(line.find_first_of(" \t", position), line.size());
    fields.push_back(line.substr(position, end - position));
    position = end;
  }
  return fields;
}

// Where a problem is: "FILE, line N" or "FILE, line N, column K".
struct Place {
  const std::string& path;
  std::size_t line = 0;

  std::string line_only() const { return path + ", line " + std::to_string(line); }
  std::string column(std::size_t column_number) const {
    return line_only() + ", column " + std::to_string(column_number);
  }
};

bool parse_integer(const std::string& text, std::int64_t& value) {
  const char* end = text.data() + text.size();
  const auto result = std::from_chars(text.data(), end, value);
  return result.ec == std::errc() && result.ptr == end;
}

std::int64_t parse_bed_coordinate(const std::string& text, const Place& place, std::size_t column_number) {
  std::int64_t value = 0;
  if (!parse_integer(text, value) || value < 0 || value > largest_position) {
    throw Error(ExitCode::usage, place.column(column_number),
                std::string("expected the interval's ") + (column_number == 2 ? "start" : "end") +
                    " as a whole number of at least 0, found " + quote(text),
                "BED columns are chrom, start, end, set name; check that the file is tab- or "
                "space-separated and has no header line other than 'track', 'browser' or '#'");
  }
  return value;
}

void check_set_name(const std::string& name, const Place& place, std::size_t column_number) {
  if (name == ".") {
    throw Error(ExitCode::usage, place.column(column_number), "expected a set name, found '.'",
                "give every line the name of the set it belongs to");
  }
}

struct BedLine {
  std::string contig_key;
  SetInterval interval;
  std::string name;
};

BedLine parse_bed_line(const std::vector<std::string>& fields, const Place& place) {
  if (fields.size() < 4) {
    throw Error(ExitCode::usage, place.line_only(),
                "BED for --sets needs the set name in column 4; found " + std::to_string(fields.size()) +
                    (fields.size() == 1 ? " column" : " columns"),
                "add the set (gene, region or mask) each interval belongs to as column 4: "
                "chrom, start, end, name");
  }
  const std::int64_t start = parse_bed_coordinate(fields[1], place, 2);
  const std::int64_t end = parse_bed_coordinate(fields[2], place, 3);
  if (end <= start) {
    throw Error(ExitCode::usage, place.column(3),
                "the interval's end " + fields[2] + " is not after its start " + fields[1] +
                    (end == start ? " (an empty interval)" : " (end before its start)"),
                "BED intervals are 0-based and half-open: a single base at position P (1-based) "
                "is written start P-1, end P");
  }
  check_set_name(fields[3], place, 4);
  return {set_contig_key(fields[0]), {start + 1, end}, fields[3]};
}

// Bases as VCF writes them (VCF 4.3, 1.4.1), any case; an ALT may also be the
// spanning deletion '*' or a symbolic <ID>, as --variants takes them.
bool is_allele(const std::string& text, bool alt) {
  if (alt && (text == "*" || (text.size() > 2 && text.front() == '<' && text.back() == '>'))) return true;
  return !text.empty() && text.find_first_not_of("ACGTNacgtn") == std::string::npos;
}

std::vector<std::string> split_on(const std::string& text, char separator) {
  std::vector<std::string> parts;
  std::size_t start = 0;
  while (true) {
    const std::size_t end = text.find(separator, start);
    parts.push_back(text.substr(start, end == std::string::npos ? std::string::npos : end - start));
    if (end == std::string::npos) return parts;
    start = end + 1;
  }
}

// A variant of a list: chr:pos:ref:alt, or any other text as a VCF ID.
SetListEntry parse_list_variant(const std::string& text, const Place& place) {
  if (text == ".") {
    throw Error(ExitCode::usage, place.column(2), "'.' is the VCF mark of a missing ID, not a variant",
                "leave the line out, or write the variant as chr:pos:ref:alt");
  }
  SetListEntry entry;
  const std::vector<std::string> parts = split_on(text, ':');
  if (parts.size() != 4) {
    entry.id = text;
    return entry;
  }
  std::int64_t position = 0;
  const bool position_ok = parse_integer(parts[1], position) && position >= 1 && position <= largest_position;
  if (parts[0].empty() || !position_ok || !is_allele(parts[2], false) || !is_allele(parts[3], true)) {
    throw Error(ExitCode::usage, place.column(2),
                "expected chr:pos:ref:alt with a position of at least 1 and alleles of A, C, G, T "
                "and N, found " + quote(text),
                "write the variant as chr:pos:ref:alt such as 3:1204511:C:T, or as its VCF ID "
                "(an ID cannot have exactly four colon-separated parts)");
  }
  entry.contig_key = set_contig_key(parts[0]);
  entry.position = position;
  entry.ref = upper_case(parts[2]);
  entry.alt = upper_case(parts[3]);
  return entry;
}

std::string describe_entry(const SetListEntry& entry) {
  if (entry.position == 0) return entry.id;
  return entry.contig_key + ":" + std::to_string(entry.position) + ":" + entry.ref + ":" + entry.alt;
}

double parse_weight(const std::string& text, const Place& place) {
  const char* begin = text.c_str();
  char* end = nullptr;
  const double weight = std::strtod(begin, &end);
  if (end != begin + text.size() || !std::isfinite(weight) || !(weight > 0.0)) {
    throw Error(ExitCode::usage, place.column(3),
                "expected the variant's weight, a finite number above 0, found " + quote(text),
                "give a positive weight or leave column 3 out for the default weights; a header "
                "line must start with '#'");
  }
  return weight;
}

// A set while the file is read: its definition, and what the checks need.
struct SetUnderConstruction {
  VariantSetDefinition definition;
  std::size_t contig_line = 0;  // the line that fixed the set's chromosome
  std::vector<std::size_t> entry_lines;  // the line of each list entry
};

class SetCollector {
 public:
  SetUnderConstruction& set_named(const std::string& name, std::size_t line) {
    auto [found, inserted] = by_name_.emplace(name, sets_.size());
    if (inserted) {
      sets_.emplace_back();
      sets_.back().definition.name = name;
      sets_.back().definition.first_line = line;
    }
    return sets_[found->second];
  }

  // Every set stays on one chromosome: the scan tests a set once the stream
  // has passed it.
  void place_on_contig(SetUnderConstruction& set, const std::string& contig_key, const Place& place,
                       std::size_t column_number) {
    VariantSetDefinition& definition = set.definition;
    if (definition.contig_key.empty()) {
      definition.contig_key = contig_key;
      set.contig_line = place.line;
      return;
    }
    if (definition.contig_key == contig_key) return;
    throw Error(ExitCode::usage, place.column(column_number),
                "the set " + quote(definition.name) + " is on chromosome " + definition.contig_key + " at line " +
                    std::to_string(set.contig_line) + " and on chromosome " + contig_key + " here",
                "a set's variants must lie on one chromosome; give the parts on other chromosomes "
                "a set name of their own");
  }

  void add_entry(SetUnderConstruction& set, SetListEntry entry, const Place& place) {
    if (entry.position > 0) place_on_contig(set, entry.contig_key, place, 2);
    set.definition.entries.push_back(std::move(entry));
    set.entry_lines.push_back(place.line);
  }

  std::vector<SetUnderConstruction>& sets() { return sets_; }

 private:
  std::vector<SetUnderConstruction> sets_;
  std::unordered_map<std::string, std::size_t> by_name_;
};

bool is_bed_header(const std::string& first_field) {
  return first_field[0] == '#' || first_field == "track" || first_field == "browser";
}

void read_bed_line(const std::vector<std::string>& fields, const Place& place, SetCollector& collector) {
  BedLine bed = parse_bed_line(fields, place);
  SetUnderConstruction& set = collector.set_named(bed.name, place.line);
  collector.place_on_contig(set, bed.contig_key, place, 1);
  set.definition.intervals.push_back(bed.interval);
}

void read_list_line(const std::vector<std::string>& fields, const Place& place, SetCollector& collector) {
  if (fields.size() < 2 || fields.size() > 3) {
    throw Error(ExitCode::usage, place.line_only(),
                "expected a set name, a variant and an optional weight, found " + std::to_string(fields.size()) +
                    (fields.size() == 1 ? " column" : " columns"),
                "write one variant per line: set name, chr:pos:ref:alt or VCF ID, and optionally "
                "its weight; a header line must start with '#'");
  }
  check_set_name(fields[0], place, 1);
  SetListEntry entry = parse_list_variant(fields[1], place);
  if (fields.size() == 3) entry.weight = parse_weight(fields[2], place);
  collector.add_entry(collector.set_named(fields[0], place.line), std::move(entry), place);
}

// The same variant twice in one set; of several, the repeat that comes first
// in the file. Checked once the file is read, by sorting, which needs no
// lookup table over a whole file of masks.
void check_repeated_entries(const SetUnderConstruction& set, const std::string& path) {
  const std::vector<SetListEntry>& entries = set.definition.entries;
  auto variant_of = [&entries](std::size_t entry_idx) {
    const SetListEntry& entry = entries[entry_idx];
    return std::tie(entry.position, entry.contig_key, entry.ref, entry.alt, entry.id);
  };
  std::vector<std::size_t> order(entries.size());
  std::iota(order.begin(), order.end(), std::size_t{0});
  // Stable: a variant's entries stay in file order.
  std::stable_sort(order.begin(), order.end(),
                   [&variant_of](std::size_t left, std::size_t right) { return variant_of(left) < variant_of(right); });
  std::size_t first = 0, repeat = entries.size();
  for (std::size_t group_start = 0, order_idx = 1; order_idx < order.size(); ++order_idx) {
    if (variant_of(order[order_idx]) != variant_of(order[order_idx - 1])) {
      group_start = order_idx;
    } else if (order_idx == group_start + 1 && order[order_idx] < repeat) {
      first = order[group_start];
      repeat = order[order_idx];
    }
  }
  if (repeat == entries.size()) return;
  throw Error(ExitCode::usage, Place{path, set.entry_lines[repeat]}.column(2),
              "the set " + quote(set.definition.name) + " lists the variant " + quote(describe_entry(entries[repeat])) +
                  " a second time (first at line " + std::to_string(set.entry_lines[first]) + ")",
              "list each variant once per set");
}

// Sorted, with touching and overlapping intervals joined.
std::vector<SetInterval> merge_intervals(std::vector<SetInterval> intervals) {
  std::sort(intervals.begin(), intervals.end(), [](const SetInterval& left, const SetInterval& right) {
    return left.first < right.first || (left.first == right.first && left.last < right.last);
  });
  std::vector<SetInterval> merged;
  for (const SetInterval& interval : intervals) {
    if (!merged.empty() && interval.first <= merged.back().last + 1) {
      merged.back().last = std::max(merged.back().last, interval.last);
    } else {
      merged.push_back(interval);
    }
  }
  return merged;
}

void fix_extent(VariantSetDefinition& definition) {
  if (!definition.intervals.empty()) {
    definition.intervals = merge_intervals(std::move(definition.intervals));
    definition.start = definition.intervals.front().first;
    definition.end = definition.intervals.back().last;
    return;
  }
  for (const SetListEntry& entry : definition.entries) {
    if (entry.position == 0) continue;
    definition.start = definition.start == 0 ? entry.position : std::min(definition.start, entry.position);
    definition.end = std::max(definition.end, entry.position);
  }
}

// Chromosomes in the order a genome is usually listed: numbered ones by
// number, then X, Y and MT, then any other contig by name.
int contig_group(const std::string& key) {
  if (!key.empty() && key.size() <= 9 && key.find_first_not_of("0123456789") == std::string::npos) return 0;
  if (key == "X") return 1;
  if (key == "Y") return 2;
  if (key == "MT") return 3;
  return 4;
}

bool contig_before(const std::string& left, const std::string& right) {
  const int left_group = contig_group(left), right_group = contig_group(right);
  if (left_group != right_group) return left_group < right_group;
  if (left_group == 0 && std::stol(left) != std::stol(right)) return std::stol(left) < std::stol(right);
  return left < right;
}

bool set_before(const VariantSetDefinition& left, const VariantSetDefinition& right) {
  const bool left_placed = !left.contig_key.empty(), right_placed = !right.contig_key.empty();
  if (left_placed != right_placed) return left_placed;
  if (!left_placed) return left.first_line < right.first_line;
  if (left.contig_key != right.contig_key) return contig_before(left.contig_key, right.contig_key);
  if (left.start != right.start) return left.start < right.start;
  if (left.end != right.end) return left.end < right.end;
  return left.name < right.name;
}

// The sets over each elementary segment between the intervals' breakpoints,
// by a sweep along each contig: a set enters at its interval's first
// position and leaves after its last.
void index_intervals(const std::vector<VariantSetDefinition>& sets,
                     std::unordered_map<std::string, IntervalSegments>& segments_by_contig) {
  struct Event {
    std::int64_t position;
    bool enters;
    std::uint32_t set_index;
  };
  std::unordered_map<std::string, std::vector<Event>> events_by_contig;
  for (std::uint32_t set_index = 0; set_index < sets.size(); ++set_index) {
    std::vector<Event>& events = events_by_contig[sets[set_index].contig_key];
    for (const SetInterval& interval : sets[set_index].intervals) {
      events.push_back({interval.first, true, set_index});
      events.push_back({interval.last + 1, false, set_index});
    }
  }
  for (auto& [contig_key, events] : events_by_contig) {
    std::sort(events.begin(), events.end(),
              [](const Event& left, const Event& right) { return left.position < right.position; });
    IntervalSegments& segments = segments_by_contig[contig_key];
    std::vector<std::uint32_t> active;  // sorted set indices
    for (std::size_t event_idx = 0; event_idx < events.size();) {
      const std::int64_t breakpoint = events[event_idx].position;
      for (; event_idx < events.size() && events[event_idx].position == breakpoint; ++event_idx) {
        const std::uint32_t set_index = events[event_idx].set_index;
        const auto at = std::lower_bound(active.begin(), active.end(), set_index);
        // A set's merged intervals neither overlap nor touch, so it leaves and
        // enters at different breakpoints.
        if (events[event_idx].enters) {
          active.insert(at, set_index);
        } else {
          active.erase(at);
        }
      }
      segments.breakpoints.push_back(breakpoint);
      segments.offsets.push_back(segments.set_indices.size());
      segments.set_indices.insert(segments.set_indices.end(), active.begin(), active.end());
    }
    segments.offsets.push_back(segments.set_indices.size());
  }
}

// Stored alleles are upper case; a VCF's may be either (VCF 4.3, 1.6.1).
bool same_allele(const std::string& stored, const std::string& query) {
  if (stored.size() != query.size()) return false;
  for (std::size_t char_idx = 0; char_idx < stored.size(); ++char_idx) {
    if (stored[char_idx] != std::toupper(static_cast<unsigned char>(query[char_idx]))) return false;
  }
  return true;
}

void append_id_members(const MembersById& ids, const std::string& id, std::vector<SetMembership>& out) {
  const auto found = ids.find(id);
  if (found != ids.end()) out.insert(out.end(), found->second.begin(), found->second.end());
}

}  // namespace

// The lookups find_sets makes: per contig key, the elementary segments of the
// BED sets' intervals; for list sets, the chr:pos:ref:alt entries by contig
// key, sorted by position, and the ID entries by ID.
struct VariantSets::Index {
  std::unordered_map<std::string, IntervalSegments> segments;
  std::unordered_map<std::string, std::vector<AlleleEntryRef>> alleles;
  MembersById ids;
};

SetFileFormat set_file_format_of(const std::string& path) {
  const std::string name = lower_case(path);
  return ends_with(name, ".bed") || ends_with(name, ".bed.gz") ? SetFileFormat::bed : SetFileFormat::list;
}

std::string set_contig_key(const std::string& contig) {
  std::string key = contig;
  if (key.size() > 3 && lower_case(key.substr(0, 3)) == "chr") key.erase(0, 3);
  if (key == "M" || key == "25") return "MT";
  if (key == "23") return "X";
  if (key == "24") return "Y";
  return key;
}

VariantSets VariantSets::load(const std::string& path, const SetFileOptions& options) {
  VariantSets result;
  result.format_ = set_file_format_of(path);
  const bool bed = result.format_ == SetFileFormat::bed;

  SetCollector collector;
  LineReader reader(path);
  std::string line;
  while (reader.next(line)) {
    const std::vector<std::string> fields = split_fields(line);
    if (fields.empty()) continue;
    if (bed ? is_bed_header(fields[0]) : fields[0][0] == '#') continue;
    ++result.summary_.lines;
    const Place place{path, reader.line_number()};
    if (bed) {
      read_bed_line(fields, place, collector);
    } else {
      read_list_line(fields, place, collector);
    }
  }
  if (collector.sets().empty()) {
    throw Error(ExitCode::usage, path, "the set file defines no set",
                bed ? "give one line per interval: chrom, start, end, set name"
                    : "give one line per variant: set name, chr:pos:ref:alt or VCF ID, optional weight");
  }

  for (SetUnderConstruction& set : collector.sets()) {
    check_repeated_entries(set, path);
    VariantSetDefinition& definition = set.definition;
    if (!bed && definition.entries.size() > options.max_variants) {
      ++result.summary_.skipped_too_large;
      result.summary_.warnings.push_back("set " + quote(definition.name) + " (" + path + ", line " +
                                         std::to_string(definition.first_line) + ") lists " +
                                         std::to_string(definition.entries.size()) +
                                         " variants, more than the limit of " +
                                         std::to_string(options.max_variants) + ": skipped");
      continue;
    }
    fix_extent(definition);
    result.sets_.push_back(std::move(definition));
  }
  if (result.sets_.empty()) {
    throw Error(ExitCode::usage, path,
                "every set in the file lists more than " + std::to_string(options.max_variants) + " variants",
                "raise the limit on a set's variants, or split the sets");
  }
  std::stable_sort(result.sets_.begin(), result.sets_.end(), set_before);
  result.summary_.sets = result.sets_.size();

  auto index = std::make_shared<Index>();
  if (bed) {
    index_intervals(result.sets_, index->segments);
  } else {
    for (std::uint32_t set_index = 0; set_index < result.sets_.size(); ++set_index) {
      const std::vector<SetListEntry>& entries = result.sets_[set_index].entries;
      for (std::uint32_t entry_idx = 0; entry_idx < entries.size(); ++entry_idx) {
        const SetListEntry& entry = entries[entry_idx];
        if (entry.position > 0) {
          index->alleles[entry.contig_key].push_back({entry.position, set_index, entry_idx});
        } else {
          index->ids[entry.id].push_back({set_index, entry.weight});
        }
      }
    }
    for (auto& contig_entries : index->alleles) std::sort(contig_entries.second.begin(), contig_entries.second.end());
  }
  result.index_ = std::move(index);
  return result;
}

void VariantSets::find_sets(const std::string& contig_key, std::int64_t position, const std::string& id,
                            const std::string& ref, const std::string& alt,
                            std::vector<SetMembership>& out) const {
  out.clear();
  if (!index_) return;
  const Index& index = *index_;

  const auto contig_segments = index.segments.find(contig_key);
  if (contig_segments != index.segments.end()) {
    const IntervalSegments& segments = contig_segments->second;
    const auto after = std::upper_bound(segments.breakpoints.begin(), segments.breakpoints.end(), position);
    if (after != segments.breakpoints.begin()) {
      const std::size_t segment = static_cast<std::size_t>(after - segments.breakpoints.begin()) - 1;
      for (std::size_t member = segments.offsets[segment]; member < segments.offsets[segment + 1]; ++member) {
        out.push_back({segments.set_indices[member], std::numeric_limits<double>::quiet_NaN()});
      }
    }
    return;  // BED sets only: each set comes once, in order
  }

  const auto contig_alleles = index.alleles.find(contig_key);
  if (contig_alleles != index.alleles.end()) {
    const auto [first, last] = std::equal_range(contig_alleles->second.begin(), contig_alleles->second.end(),
                                                AlleleEntryRef{position, 0, 0},
                                                [](const AlleleEntryRef& left, const AlleleEntryRef& right) {
                                                  return left.position < right.position;
                                                });
    for (auto member = first; member != last; ++member) {
      const SetListEntry& entry = sets_[member->set_index].entries[member->entry_index];
      if (same_allele(entry.ref, ref) && same_allele(entry.alt, alt)) out.push_back({member->set_index, entry.weight});
    }
  }
  if (!index.ids.empty() && !id.empty() && id != ".") {
    append_id_members(index.ids, id, out);
    if (id.find(';') != std::string::npos) {
      for (const std::string& part : split_on(id, ';')) append_id_members(index.ids, part, out);
    }
  }
  if (out.size() > 1) {
    // A set may take the variant by its alleles and by IDs: the allele
    // entry, appended first, keeps its weight, else the first of the IDs.
    std::stable_sort(out.begin(), out.end(), [](const SetMembership& left, const SetMembership& right) {
      return left.set_index < right.set_index;
    });
    out.erase(std::unique(out.begin(), out.end(),
                          [](const SetMembership& left, const SetMembership& right) {
                            return left.set_index == right.set_index;
                          }),
              out.end());
  }
}

}  // namespace tamis
