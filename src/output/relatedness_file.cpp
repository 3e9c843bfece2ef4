// The relatedness file: written by `tamis relatedness`, read by `scan
// --relatedness` (see include/tamis/relatedness_file.hpp).
#include "tamis/relatedness_file.hpp"

#include <htslib/bgzf.h>
#include <htslib/kstring.h>
#include <sys/stat.h>

#include <algorithm>
#include <charconv>
#include <cmath>
#include <limits>
#include <map>
#include <optional>
#include <string_view>
#include <unordered_map>
#include <unordered_set>

#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

constexpr const char* kFileType = "tamis relatedness matrix v1";
constexpr const char* kPartKey = "tamis_relatedness_part";
constexpr const char* kSamplesKey = "tamis_relatedness_samples";
constexpr const char* kMarkersKey = "tamis_relatedness_markers";
constexpr const char* kKeepAboveKey = "tamis_relatedness_keep_above";

std::string base_name_of(const std::string& path) {
  const std::size_t slash = path.find_last_of('/');
  return slash == std::string::npos ? path : path.substr(slash + 1);
}

void append_number(double value, std::string& out) {
  char buffer[32];
  // The shortest text that reads back as the same double.
  const std::to_chars_result written = std::to_chars(buffer, buffer + sizeof buffer, value);
  out.append(buffer, written.ptr);
}

// A double-quoted YAML scalar: backslash, quote and line breaks escaped.
std::string quoted(const std::string& text) {
  std::string out = "\"";
  for (char letter : text) {
    if (letter == '"' || letter == '\\') out += '\\';
    if (letter == '\n') {
      out += "\\n";
      continue;
    }
    out += letter;
  }
  return out + "\"";
}

// ---- reading ---------------------------------------------------------------

[[noreturn]] void refuse(const std::string& where, const std::string& what, const std::string& fix) {
  throw Error(ExitCode::results_input, where, what, fix);
}

std::string line_place(const std::string& path, std::uint64_t line_number) {
  return path + ", line " + std::to_string(line_number);
}

// Where a file stands in a set of parts: from its sidecar, or its name.
struct PartTag {
  int part = 1;
  int part_count = 1;
  std::string fingerprint;  // empty when only the name told
  std::string source;       // what told: "its metadata FILE" or "its name"
};

std::optional<std::pair<int, int>> parse_part_text(std::string_view text) {
  int part = 0, count = 0;
  const auto slash = text.find('/');
  if (slash == std::string_view::npos) return std::nullopt;
  const auto part_end = std::from_chars(text.data(), text.data() + slash, part);
  const auto count_end = std::from_chars(text.data() + slash + 1, text.data() + text.size(), count);
  if (part_end.ptr != text.data() + slash || count_end.ptr != text.data() + text.size() || count < 1 || part < 1 ||
      part > count) {
    return std::nullopt;
  }
  return std::make_pair(part, count);
}

// "NAME.partK-of-N.tsv.gz" and the like: K and N from the file name.
std::optional<std::pair<int, int>> part_from_name(const std::string& path) {
  const std::string name = base_name_of(path);
  for (std::size_t at = name.find(".part"); at != std::string::npos; at = name.find(".part", at + 1)) {
    int part = 0, count = 0;
    const char* begin = name.data() + at + 5;
    const char* end = name.data() + name.size();
    const auto part_end = std::from_chars(begin, end, part);
    if (part_end.ec != std::errc() || std::string_view(part_end.ptr, end - part_end.ptr).substr(0, 4) != "-of-") continue;
    const auto count_end = std::from_chars(part_end.ptr + 4, end, count);
    if (count_end.ec != std::errc() || (count_end.ptr != end && *count_end.ptr != '.')) continue;
    if (part >= 1 && count >= part) return std::make_pair(part, count);
  }
  return std::nullopt;
}

bool file_exists(const std::string& path) {
  struct stat info;
  return stat(path.c_str(), &info) == 0;
}

std::optional<PartTag> part_tag_of(const std::string& path, const std::string& md5) {
  const std::string sidecar_path = path + "-meta.yaml";
  if (file_exists(sidecar_path)) {
    std::string recorded_md5;
    const SidecarFields fields = read_metadata_sidecar(sidecar_path, &recorded_md5);
    std::optional<PartTag> tag;
    for (const auto& [key, value] : fields.extra) {
      if (key == kPartKey) {
        const auto part = parse_part_text(value);
        if (!part) refuse(sidecar_path, "'" + value + "' is not a part K/N", "rebuild the part with tamis relatedness");
        if (!tag) tag = PartTag{};
        tag->part = part->first;
        tag->part_count = part->second;
        tag->source = "its metadata " + sidecar_path;
      }
    }
    if (tag) {
      for (const auto& [key, value] : fields.extra) {
        if (key == kFingerprintKey) tag->fingerprint = value;
      }
      if (!recorded_md5.empty() && recorded_md5 != md5) {
        refuse(path, "the file changed after tamis wrote it (its md5 differs from the one in " + sidecar_path + ")",
               "rebuild it with tamis relatedness, or remove " + sidecar_path + " to use the file as it is");
      }
      return tag;
    }
  }
  if (const auto part = part_from_name(path)) return PartTag{part->first, part->second, "", "its name"};
  return std::nullopt;
}

std::string describe_tag(const std::string& path, const PartTag& tag) {
  return path + " (part " + std::to_string(tag.part) + " of " + std::to_string(tag.part_count) + ", by " +
         tag.source + ")";
}

// Parts must come in whole sets: one count N, every K from 1 to N once, one
// fingerprint. Files that are no part stand alone.
void check_part_set(const std::vector<std::string>& paths, const std::vector<std::optional<PartTag>>& tags) {
  std::size_t first_tagged = paths.size();
  std::map<int, std::size_t> file_of_part;
  for (std::size_t file_idx = 0; file_idx < paths.size(); ++file_idx) {
    if (!tags[file_idx]) continue;
    const PartTag& tag = *tags[file_idx];
    if (first_tagged == paths.size()) first_tagged = file_idx;
    const PartTag& reference = *tags[first_tagged];
    if (tag.part_count != reference.part_count) {
      refuse(paths[file_idx],
             "the file is " + describe_tag(paths[file_idx], tag) + ", but " +
                 describe_tag(paths[first_tagged], reference) + ": parts of different sets",
             "give the parts of one tamis relatedness run");
    }
    if (!tag.fingerprint.empty() && !reference.fingerprint.empty() && tag.fingerprint != reference.fingerprint) {
      refuse(paths[file_idx],
             "the part was made from other inputs or options than " + paths[first_tagged] + " (run fingerprint " +
                 tag.fingerprint + ", not " + reference.fingerprint + ")",
             "rebuild every part with the same command, changing only --part");
    }
    const auto [earlier, added] = file_of_part.emplace(tag.part, file_idx);
    if (!added && tag.part_count == 1) {
      refuse(paths[file_idx], "this and " + paths[earlier->second] + " are two whole matrices of tamis relatedness",
             "give one matrix, or the parts of one --part K/N run");
    }
    if (!added) {
      refuse(paths[file_idx],
             "part " + std::to_string(tag.part) + " of " + std::to_string(tag.part_count) + " is given twice (also " +
                 paths[earlier->second] + ")",
             "give each part once");
    }
  }
  if (first_tagged == paths.size()) return;
  const int part_count = tags[first_tagged]->part_count;
  std::string missing;
  for (int part = 1; part <= part_count; ++part) {
    if (!file_of_part.count(part)) missing += (missing.empty() ? "" : ", ") + std::to_string(part);
  }
  if (!missing.empty()) {
    refuse(paths[first_tagged],
           "the matrix is in " + std::to_string(part_count) + " parts, and part(s) " + missing + " are not given",
           "give every part, for example PREFIX.relatedness.part*-of-" + std::to_string(part_count) + ".tsv.gz");
  }
}

// The fields of one line, split at tabs, without copying.
void split_tabs(std::string_view line, std::vector<std::string_view>& fields) {
  fields.clear();
  std::size_t start = 0;
  while (true) {
    const std::size_t tab = line.find('\t', start);
    fields.push_back(line.substr(start, tab == std::string_view::npos ? std::string_view::npos : tab - start));
    if (tab == std::string_view::npos) return;
    start = tab + 1;
  }
}

class MatrixAssembler {
 public:
  void read_file(const std::string& path);
  RelatednessFileContents take() { return std::move(contents_); }

 private:
  std::uint32_t index_of(std::string_view id) {
    const auto [found, added] = index_.emplace(std::string(id), static_cast<std::uint32_t>(contents_.sample_ids.size()));
    if (added) {
      contents_.sample_ids.push_back(found->first);
      contents_.diagonal.push_back(std::numeric_limits<double>::quiet_NaN());
    }
    return found->second;
  }
  void add_row(const std::vector<std::string_view>& fields, const std::string& path, std::uint64_t line_number);

  RelatednessFileContents contents_;
  std::unordered_map<std::string, std::uint32_t> index_;
  std::unordered_set<std::uint64_t> pairs_seen_;
};

void MatrixAssembler::add_row(const std::vector<std::string_view>& fields, const std::string& path,
                              std::uint64_t line_number) {
  if (fields.size() < 3) {
    refuse(line_place(path, line_number), "expected at least 3 tab-separated fields, found " + std::to_string(fields.size()),
           "write sample_1, sample_2 and relatedness separated by tabs");
  }
  if (fields[0].empty() || fields[1].empty()) {
    refuse(line_place(path, line_number), "a sample ID is empty", "give both samples of every pair");
  }
  double value = 0.0;
  const std::string_view text = fields[2];
  const auto parsed = std::from_chars(text.data(), text.data() + text.size(), value);
  if (text.empty() || parsed.ec != std::errc() || parsed.ptr != text.data() + text.size() || !std::isfinite(value)) {
    refuse(line_place(path, line_number), "relatedness '" + std::string(text) + "' is not a number",
           "write a finite decimal number such as 0.25 or 1.2e-3 (a pair that is not related is left out)");
  }
  const std::uint32_t first = index_of(fields[0]);
  const std::uint32_t second = index_of(fields[1]);
  if (first == second) {
    if (!std::isnan(contents_.diagonal[first])) {
      refuse(line_place(path, line_number), "sample " + std::string(fields[0]) + " is paired with itself a second time",
             "give one diagonal row per sample");
    }
    if (!(value > 0.0)) {
      refuse(line_place(path, line_number),
             "the relatedness of sample " + std::string(fields[0]) + " with itself is " + std::string(text) +
                 ", not positive",
             "a diagonal value is 1 + F (inbreeding F), near 1; leave the row out to take 1");
    }
    contents_.diagonal[first] = value;
    return;
  }
  const std::uint32_t low = std::min(first, second), high = std::max(first, second);
  if (!pairs_seen_.insert((static_cast<std::uint64_t>(low) << 32) | high).second) {
    refuse(line_place(path, line_number),
           "the pair " + std::string(fields[0]) + ", " + std::string(fields[1]) +
               " is listed twice (in either order)",
           "list each pair once");
  }
  if (value != 0.0) contents_.pairs.push_back({low, high, value});
}

void MatrixAssembler::read_file(const std::string& path) {
  BGZF* input = bgzf_open(path.c_str(), "r");
  if (!input) refuse(path, "cannot open the relatedness file", "check the path and the file's permissions");
  kstring_t line = KS_INITIALIZE;
  std::vector<std::string_view> fields;
  std::uint64_t line_number = 0;
  int status = 0;
  try {
    while ((status = bgzf_getline(input, '\n', &line)) >= 0) {
      ++line_number;
      std::string_view text(line.s, line.l);
      if (!text.empty() && text.back() == '\r') text.remove_suffix(1);
      split_tabs(text, fields);
      if (line_number == 1) {
        if (fields.size() < 3 || fields[0] != "sample_1" || fields[1] != "sample_2" || fields[2] != "relatedness") {
          refuse(line_place(path, 1), "expected a header line whose first columns are sample_1, sample_2, relatedness",
                 "start the file with the line sample_1<TAB>sample_2<TAB>relatedness");
        }
        continue;
      }
      if (text.empty()) continue;
      add_row(fields, path, line_number);
    }
    if (status < -1) refuse(path + ", after line " + std::to_string(line_number), "the file is damaged or truncated",
                            "rebuild or copy the file again");
    if (line_number == 0) {
      refuse(path, "the file is empty", "give a file with the header line sample_1<TAB>sample_2<TAB>relatedness");
    }
  } catch (...) {
    ks_free(&line);
    bgzf_close(input);
    throw;
  }
  ks_free(&line);
  bgzf_close(input);
}

}  // namespace

const std::vector<std::string>& relatedness_columns() {
  static const std::vector<std::string> columns = {"sample_1", "sample_2", "relatedness", "shared_markers",
                                                   "relationship_degree"};
  return columns;
}

std::string relatedness_file_path(const std::string& prefix, int part, int part_count) {
  if (part_count <= 1) return prefix + ".relatedness.tsv.gz";
  return prefix + ".relatedness.part" + std::to_string(part) + "-of-" + std::to_string(part_count) + ".tsv.gz";
}

struct RelatednessFileWriter::Impl {
  Impl(const std::string& path, const std::vector<std::string>& ids) : file(path), sample_ids(ids) {}
  BgzfTextFile file;
  const std::vector<std::string>& sample_ids;
  std::string text;  // rows not yet handed to the file
};

RelatednessFileWriter::RelatednessFileWriter(const std::string& path, const std::vector<std::string>& sample_ids)
    : impl_(std::make_unique<Impl>(path, sample_ids)) {
  for (const std::string& column : relatedness_columns()) impl_->text += (impl_->text.empty() ? "" : "\t") + column;
  impl_->text += '\n';
}

RelatednessFileWriter::~RelatednessFileWriter() = default;

void RelatednessFileWriter::add(const RelatednessEntry& entry) {
  std::string& text = impl_->text;
  text += impl_->sample_ids[entry.first];
  text += '\t';
  text += impl_->sample_ids[entry.second];
  text += '\t';
  append_number(entry.relatedness, text);
  text += '\t';
  text += std::to_string(entry.markers);
  text += '\t';
  text += entry.first == entry.second ? kSelfLabel : degree_label(degree_of(entry.relatedness));
  text += '\n';
  ++rows_;
  constexpr std::size_t kChunk = 1 << 20;
  if (text.size() >= kChunk) {
    impl_->file.write(text);
    text.clear();
  }
}

void RelatednessFileWriter::commit() {
  impl_->file.write(impl_->text);
  impl_->text.clear();
  impl_->file.commit(IndexKind::none);
}

void write_relatedness_file(const std::string& path, const std::vector<std::string>& sample_ids,
                            const std::vector<RelatednessEntry>& entries) {
  RelatednessFileWriter writer(path, sample_ids);
  for (const RelatednessEntry& entry : entries) writer.add(entry);
  writer.commit();
}

void write_relatedness_sidecar(const std::string& data_path, const RelatednessProvenance& provenance) {
  const std::string name = base_name_of(data_path);
  std::string text = "# tamis relatedness matrix: metadata of " + name + "\n";
  text += "data_file_name: " + quoted(name) + "\n";
  text += std::string("file_type: ") + quoted(kFileType) + "\n";
  text += "data_file_md5sum: " + quoted(md5_hex_of_file(data_path)) + "\n";
  text += "analysis_software: " + quoted(std::string("tamis ") + TAMIS_VERSION) + "\n";
  text += std::string(kSamplesKey) + ": " + std::to_string(provenance.sample_count) + "\n";
  text += std::string(kMarkersKey) + ": " + std::to_string(provenance.marker_count) + "\n";
  text += std::string(kPartKey) + ": " + std::to_string(provenance.part) + "/" +
          std::to_string(provenance.part_count) + "\n";
  text += std::string(kKeepAboveKey) + ": ";
  append_number(provenance.keep_above, text);
  text += "\n" + std::string(kFingerprintKey) + ": " + provenance.fingerprint + "\n";
  PlainTextFile sidecar(data_path + "-meta.yaml");
  sidecar.write(text);
  sidecar.commit();
}

RelatednessFileContents read_relatedness_files(const std::vector<std::string>& paths) {
  if (paths.empty()) throw Error(ExitCode::usage, "--relatedness", "no relatedness file given", "name at least one file");
  std::vector<std::string> checksums(paths.size());
  std::vector<std::optional<PartTag>> tags(paths.size());
  for (std::size_t file_idx = 0; file_idx < paths.size(); ++file_idx) {
    if (!file_exists(paths[file_idx])) {
      refuse(paths[file_idx], "the relatedness file does not exist", "check the path");
    }
    checksums[file_idx] = md5_hex_of_file(paths[file_idx]);
    tags[file_idx] = part_tag_of(paths[file_idx], checksums[file_idx]);
  }
  check_part_set(paths, tags);
  MatrixAssembler assembler;
  for (const std::string& path : paths) assembler.read_file(path);
  RelatednessFileContents contents = assembler.take();
  // The same files in another order are the same matrix.
  std::sort(checksums.begin(), checksums.end());
  for (const std::string& checksum : checksums) contents.checksum += (contents.checksum.empty() ? "" : "+") + checksum;
  return contents;
}

}  // namespace tamis
