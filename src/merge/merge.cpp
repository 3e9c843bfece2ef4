#include "tamis/merge.hpp"

#include <glob.h>

#include <algorithm>
#include <fstream>
#include <map>
#include <set>
#include <sstream>

#include "tamis/errors.hpp"
#include "tamis/results_reader.hpp"
#include "tamis/results_writer.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

struct Range {
  std::string contig;
  long long first = 0;
  long long last = 0;
};

struct Part {
  std::string prefix;
  int shard = 0;
  int shard_count = 0;
  std::string fingerprint;
  std::vector<Range> ranges;
  std::map<std::string, std::string> result_paths;  // trait -> file
  std::map<std::string, std::string> set_paths;     // trait -> PREFIX.TRAIT.sets.tsv.gz (scan --sets)
  SidecarFields sidecar;                             // of the first trait's file
};

[[noreturn]] void refuse(const std::string& where, const std::string& what, const std::string& fix) {
  throw Error(ExitCode::usage, where, what, fix);
}

const std::string set_suffix = ".sets";

bool ends_with(const std::string& text, const std::string& ending) {
  return text.size() > ending.size() && text.compare(text.size() - ending.size(), ending.size(), ending) == 0;
}

// PREFIX.TRAIT.sets.tsv.gz files move from `files` (where the pattern
// found them as trait "TRAIT.sets") to the set files of TRAIT, when TRAIT
// has results of its own.
std::map<std::string, std::string> take_set_files(std::map<std::string, std::string>& files) {
  std::map<std::string, std::string> set_files;
  for (auto entry = files.begin(); entry != files.end();) {
    const std::string& name = entry->first;
    const std::string trait = name.substr(0, name.size() - set_suffix.size());
    if (ends_with(name, set_suffix) && files.count(trait) > 0) {
      set_files[trait] = entry->second;
      entry = files.erase(entry);
    } else {
      ++entry;
    }
  }
  return set_files;
}

// Every PREFIX.TRAIT.tsv.gz beside the prefix, by trait (set files included,
// as trait "TRAIT.sets"; see take_set_files).
std::map<std::string, std::string> find_result_files(const std::string& prefix) {
  std::map<std::string, std::string> files;
  glob_t matches{};
  const std::string pattern = prefix + ".*.tsv.gz";
  if (glob(pattern.c_str(), 0, nullptr, &matches) == 0) {
    for (std::size_t match_idx = 0; match_idx < matches.gl_pathc; ++match_idx) {
      const std::string path = matches.gl_pathv[match_idx];
      const std::string trait = path.substr(prefix.size() + 1, path.size() - prefix.size() - 1 - 7);
      files[trait] = path;
    }
  }
  globfree(&matches);
  if (files.empty()) {
    refuse(prefix, "no results files PREFIX.TRAIT.tsv.gz were found for this part",
           "give the --out prefix of each finished `tamis scan --shard K/N`");
  }
  return files;
}

std::string extra_value(const SidecarFields& fields, const std::string& key) {
  for (const auto& [name, value] : fields.extra) {
    if (name == key) return value;
  }
  return "";
}

std::vector<Range> parse_ranges(const std::string& text, const std::string& where) {
  std::vector<Range> ranges;
  std::istringstream items(text);
  std::string item;
  while (std::getline(items, item, ';')) {
    const std::size_t colon = item.rfind(':');
    const std::size_t dash = item.rfind('-');
    if (colon == std::string::npos || dash == std::string::npos || dash < colon) {
      throw Error(ExitCode::results_input, where, "cannot read the shard range '" + item + "'",
                  "the metadata file was edited or damaged; rerun that shard");
    }
    ranges.push_back({item.substr(0, colon), std::stoll(item.substr(colon + 1, dash - colon - 1)),
                      std::stoll(item.substr(dash + 1))});
  }
  return ranges;
}

Part read_part(const std::string& prefix) {
  Part part;
  part.prefix = prefix;
  part.result_paths = find_result_files(prefix);
  part.set_paths = take_set_files(part.result_paths);
  const std::string sidecar_path = part.result_paths.begin()->second + "-meta.yaml";
  part.sidecar = read_metadata_sidecar(sidecar_path);
  const std::string shard = extra_value(part.sidecar, kShardKey);
  if (shard.empty() || std::sscanf(shard.c_str(), "%d/%d", &part.shard, &part.shard_count) != 2) {
    refuse(sidecar_path, "this part was not scanned as a shard (no " + std::string(kShardKey) + " entry)",
           "merge only the outputs of `tamis scan --shard K/N`");
  }
  part.fingerprint = extra_value(part.sidecar, kFingerprintKey);
  part.ranges = parse_ranges(extra_value(part.sidecar, kShardRangesKey), sidecar_path);
  return part;
}

std::set<std::string> traits_of(const std::map<std::string, std::string>& files) {
  std::set<std::string> traits;
  for (const auto& entry : files) traits.insert(entry.first);
  return traits;
}

void check_same_run(const std::vector<Part>& parts) {
  const Part& first = parts.front();
  for (const Part& part : parts) {
    if (part.fingerprint != first.fingerprint || part.shard_count != first.shard_count) {
      refuse(part.prefix,
             "this part comes from a different run than " + first.prefix + " (fingerprint " + part.fingerprint +
                 " of " + std::to_string(part.shard_count) + " shards, against " + first.fingerprint + " of " +
                 std::to_string(first.shard_count) + ")",
             "merge parts scanned with the same inputs, options and shard count; rerun the odd ones out");
    }
    if (traits_of(part.result_paths) != traits_of(first.result_paths)) {
      refuse(part.prefix, "this part has results for other traits than " + first.prefix,
             "check that every part finished and that no files were removed");
    }
  }
}

// Sets are tested in every shard of a run with --sets, so either every part
// has a trait's set results or none has.
void check_same_sets(const std::vector<Part>& parts) {
  const Part& first = parts.front();
  for (const Part& part : parts) {
    if (traits_of(part.set_paths) == traits_of(first.set_paths)) continue;
    const Part& lacking = part.set_paths.size() < first.set_paths.size() ? part : first;
    const Part& having = &lacking == &part ? first : part;
    std::string missing;
    for (const auto& entry : having.set_paths) {
      if (lacking.set_paths.count(entry.first) == 0) {
        missing += (missing.empty() ? "" : ", ") + lacking.prefix + "." + entry.first + set_suffix + ".tsv.gz";
      }
    }
    refuse(lacking.prefix,
           "this part has no set results " + missing + ", which " + having.prefix + " has",
           "set results come from `scan --sets`: scan every shard with the same --sets, or merge parts scanned "
           "without it; check that no files were removed");
  }
}

void check_complete(const std::vector<Part>& parts) {
  const int shard_count = parts.front().shard_count;
  std::map<int, std::string> seen;
  for (const Part& part : parts) {
    auto [existing, inserted] = seen.emplace(part.shard, part.prefix);
    if (!inserted) {
      refuse(part.prefix, "shard " + std::to_string(part.shard) + "/" + std::to_string(shard_count) +
                              " is given twice (also as " + existing->second + ")",
             "give each shard once");
    }
  }
  std::string missing;
  for (int shard = 1; shard <= shard_count; ++shard) {
    if (!seen.count(shard)) missing += (missing.empty() ? "" : ", ") + std::to_string(shard);
  }
  if (!missing.empty()) {
    refuse("tamis merge", "shards " + missing + " of " + std::to_string(shard_count) + " are missing",
           "run the missing shards (tamis scan ... --shard K/" + std::to_string(shard_count) + ") and merge again");
  }
}

bool ranges_overlap(const Range& left, const Range& right) {
  return left.contig == right.contig && left.first <= right.last && right.first <= left.last;
}

void check_disjoint(const std::vector<Part>& parts) {
  for (std::size_t left_idx = 0; left_idx < parts.size(); ++left_idx) {
    for (std::size_t right_idx = left_idx + 1; right_idx < parts.size(); ++right_idx) {
      for (const Range& left : parts[left_idx].ranges) {
        for (const Range& right : parts[right_idx].ranges) {
          if (ranges_overlap(left, right)) {
            refuse(parts[right_idx].prefix,
                   "this part overlaps " + parts[left_idx].prefix + " on " + left.contig + ":" +
                       std::to_string(std::max(left.first, right.first)) + "-" +
                       std::to_string(std::min(left.last, right.last)),
                   "merge the parts of one sharded run only");
          }
        }
      }
    }
  }
}

// Copies the reader's remaining rows after `text` (a header, or nothing) to
// `out` in chunks of about a megabyte, showing each row to `check_row` first.
template <typename CheckRow>
void copy_reader_rows(ResultsReader& reader, std::string text, BgzfTextFile& out, CheckRow check_row) {
  while (reader.next_row()) {
    check_row(reader);
    text.append(reader.line());
    text += '\n';
    if (text.size() > (1u << 20)) {
      out.write(text);
      text.clear();
    }
  }
  out.write(text);
}

void copy_rows(const std::string& path, bool with_header, BgzfTextFile& out) {
  ResultsReader reader(path);
  // The standard columns come first; an interaction scan's files add more.
  const std::vector<std::string>& columns = reader.header();
  const std::vector<std::string> extra(columns.begin() + std::min(columns.size(), result_columns().size()),
                                       columns.end());
  copy_reader_rows(reader, with_header ? result_header_line(extra) : std::string(), out, [](const ResultsReader&) {});
}

// Where the last set row copied lies, to check that the parts' rows join in
// order: chromosomes in the order the stream met them, starts rising within each.
struct SetRowOrder {
  std::vector<std::string> chromosomes_passed;
  std::string chromosome;
  std::int64_t start = 0;
  std::string place;  // of the last row, for the message

  void check(const ResultsReader& reader, std::size_t chromosome_column, std::size_t start_column) {
    const std::string row_chromosome(reader.field(chromosome_column));
    const std::int64_t row_start = reader.integer(start_column);
    const bool passed = std::find(chromosomes_passed.begin(), chromosomes_passed.end(), row_chromosome) !=
                        chromosomes_passed.end();
    if (passed || (row_chromosome == chromosome && row_start < start)) {
      throw Error(ExitCode::results_input, reader.place(),
                  "set " + std::string(reader.field(0)) + " at " + row_chromosome + ":" +
                      std::to_string(row_start) + " comes after " + chromosome + ":" + std::to_string(start) +
                      " (" + place + "), so the merged set results would be out of order",
                  "each set belongs to one shard and the shards follow the genome; rerun the shards of one "
                  "`tamis scan --sets ... --shard K/N` run and merge them");
    }
    if (row_chromosome != chromosome) {
      if (!chromosome.empty()) chromosomes_passed.push_back(chromosome);
      chromosome = row_chromosome;
    }
    start = row_start;
    place = reader.place();
  }
};

void copy_set_rows(const std::string& path, SetRowOrder& order, BgzfTextFile& out) {
  ResultsReader reader(path, set_result_columns());
  if (reader.header() != set_result_columns()) {
    throw Error(ExitCode::results_input, path + ", line 1",
                "the set results' columns differ from those this version of tamis writes",
                "merge parts written by one version of tamis");
  }
  const std::size_t chromosome_column = reader.column_index("chromosome");
  const std::size_t start_column = reader.column_index("start");
  copy_reader_rows(reader, std::string(), out,
                   [&](const ResultsReader& row) { order.check(row, chromosome_column, start_column); });
}

// The parts' set rows joined in shard order under one header, indexed afresh.
std::string merge_trait_sets(const MergeOptions& options, const std::vector<Part>& parts, const std::string& trait) {
  const std::string path = options.out_prefix + "." + trait + set_suffix + ".tsv.gz";
  BgzfTextFile out(path);
  out.write(set_result_header_line());
  SetRowOrder order;
  for (const Part& part : parts) copy_set_rows(part.set_paths.at(trait), order, out);
  out.commit(IndexKind::tabix_sets);
  return path;
}

// The merged file describes the whole run: shard entries go, the run's
// fingerprint stays.
void drop_shard_entries(SidecarFields& fields) {
  std::vector<std::pair<std::string, std::string>> kept;
  for (const auto& entry : fields.extra) {
    if (entry.first != kShardKey && entry.first != kShardRangesKey) kept.push_back(entry);
  }
  fields.extra = kept;
}

std::string merge_trait(const MergeOptions& options, const std::vector<Part>& parts, const std::string& trait) {
  const std::string path = options.out_prefix + "." + trait + ".tsv.gz";
  BgzfTextFile out(path);
  for (std::size_t part_idx = 0; part_idx < parts.size(); ++part_idx) {
    copy_rows(parts[part_idx].result_paths.at(trait), part_idx == 0, out);
  }
  out.commit(IndexKind::tabix_results);
  SidecarFields fields = read_metadata_sidecar(parts.front().result_paths.at(trait) + "-meta.yaml");
  drop_shard_entries(fields);
  fields.data_file_name.clear();
  write_metadata_sidecar(path, fields);
  return path;
}

void write_combined_log(const std::vector<Part>& parts) {
  std::string text;
  for (const Part& part : parts) {
    text += "== shard " + std::to_string(part.shard) + "/" + std::to_string(part.shard_count) + ": " + part.prefix +
            ".log ==\n";
    std::ifstream input(part.prefix + ".log");
    std::stringstream content;
    content << input.rdbuf();
    text += input ? content.str() : std::string("(no log found)\n");
  }
  current_log().detail(text);
}

}  // namespace

MergeSummary merge_shards(const MergeOptions& options) {
  if (options.part_prefixes.empty()) refuse("tamis merge", "no parts given", "list the --out prefix of every shard");
  std::vector<Part> parts;
  for (const std::string& prefix : options.part_prefixes) parts.push_back(read_part(prefix));
  check_same_run(parts);
  check_same_sets(parts);
  check_complete(parts);
  check_disjoint(parts);
  std::sort(parts.begin(), parts.end(), [](const Part& a, const Part& b) { return a.shard < b.shard; });

  MergeSummary summary;
  summary.shard_count = parts.front().shard_count;
  current_log().line("merging " + std::to_string(parts.size()) + " shards of run " + parts.front().fingerprint);
  // Set results first: their order is checked as they are copied, and a
  // refusal then leaves no merged file at all.
  std::vector<std::string> set_files;
  for (const auto& entry : parts.front().set_paths) set_files.push_back(merge_trait_sets(options, parts, entry.first));
  for (const auto& entry : parts.front().result_paths) {
    summary.result_files.push_back(merge_trait(options, parts, entry.first));
  }
  summary.result_files.insert(summary.result_files.end(), set_files.begin(), set_files.end());
  write_combined_log(parts);
  return summary;
}

}  // namespace tamis
