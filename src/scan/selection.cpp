// Variant lists: which variants a scan or a confirmation takes, and the index
// regions that hold them, so that only those records are read.
#include <algorithm>
#include <cmath>
#include <fstream>
#include <optional>
#include <set>

#include "tamis/errors.hpp"
#include "tamis/results_reader.hpp"
#include "tamis/results_writer.hpp"
#include "scan/variant_keys.hpp"
#include "tamis/scan.hpp"

namespace tamis {

std::vector<std::string> contig_candidates(const std::string& code) {
  if (code == "23") return {"X", "chrX", "23", "chr23"};
  if (code == "24") return {"Y", "chrY", "24", "chr24"};
  if (code == "25") return {"MT", "chrM", "M", "chrMT", "25"};
  return {code, "chr" + code};
}

namespace {

void add_range(const std::string& code, std::int64_t first, std::int64_t last, std::vector<GenomicRegion>& regions) {
  for (const std::string& contig : contig_candidates(code)) regions.push_back({contig, first, last});
}

void add_position(const std::string& code, std::int64_t position, std::vector<GenomicRegion>& regions) {
  add_range(code, position, position, regions);
}

std::string trim(const std::string& text) {
  const std::size_t first = text.find_first_not_of(" \t\r");
  if (first == std::string::npos) return "";
  return text.substr(first, text.find_last_not_of(" \t\r") - first + 1);
}

bool file_exists(const std::string& path) { return std::ifstream(path).good(); }

// The trait a results file holds: its sidecar's trait_description, else the
// TRAIT of PREFIX.TRAIT.tsv.gz.
std::string trait_of_results(const std::string& results_path) {
  const std::string sidecar = results_path + "-meta.yaml";
  if (file_exists(sidecar)) {
    const SidecarFields fields = read_metadata_sidecar(sidecar);
    if (!fields.trait_description.empty()) return fields.trait_description;
  }
  std::string name = results_path.substr(results_path.find_last_of('/') + 1);
  const std::string suffix = ".tsv.gz";
  if (name.size() > suffix.size() && name.compare(name.size() - suffix.size(), suffix.size(), suffix) == 0) {
    name.resize(name.size() - suffix.size());
  }
  return name.substr(name.find_last_of('.') + 1);
}

// Bases as VCF writes REF and ALT (VCF 4.3, 1.4.1); an ALT may also be the
// spanning deletion '*' or a symbolic <ID>. So an HLA allele name such as
// HLA-A*01:01:01:01, which has four colon-separated parts, stays an ID.
bool is_allele(const std::string& text, bool alt) {
  if (alt && (text == "*" || (text.size() > 2 && text.front() == '<' && text.back() == '>'))) return true;
  return !text.empty() && text.find_first_not_of("ACGTNacgtn") == std::string::npos;
}

}  // namespace

std::optional<AlleleKey> parse_allele_key(const std::string& entry) {
  std::vector<std::string> parts;
  std::size_t start = 0, colon;
  while ((colon = entry.find(':', start)) != std::string::npos) {
    parts.push_back(entry.substr(start, colon - start));
    start = colon + 1;
  }
  parts.push_back(entry.substr(start));
  if (parts.size() != 4 || parts[0].empty() || !is_allele(parts[2], false) || !is_allele(parts[3], true)) {
    return std::nullopt;
  }
  const std::string& digits = parts[1];
  if (digits.empty() || digits.find_first_not_of("0123456789") != std::string::npos) return std::nullopt;
  const long long position = std::strtoll(digits.c_str(), nullptr, 10);
  if (position < 1) return std::nullopt;
  return AlleleKey{parts[0], position, parts[2], parts[3]};
}

namespace {

// A list line that cannot be an ID: "." (the ID column's missing value,
// which would take every unnamed record) or one holding whitespace, which no
// VCF ID does (VCF 4.3, 1.6.1); most likely a file of several columns.
void check_id_entry(const std::string& entry, const std::string& where) {
  if (entry == ".") {
    throw Error(ExitCode::usage, where, "'.' is the VCF mark of a missing ID, not a variant",
                "leave the line out, or write the variant as chr:pos:ref:alt");
  }
  if (entry.find_first_of(" \t") != std::string::npos) {
    throw Error(ExitCode::usage, where, "expected one ID or chr:pos:ref:alt, found '" + entry + "'",
                "write one variant per line, for example rs12345, chr1:16190 or 2:1234567:A:G");
  }
}

}  // namespace

std::size_t VariantSelection::size() const {
  std::size_t count = record_ids.size();
  for (const auto& entry : trait_variant_ids) count += entry.second.size();
  return count;
}

bool VariantSelection::takes(const std::string& trait, const std::string& id, const std::string& variant_id) const {
  if (record_ids.count(id) || variant_ids.count(variant_id)) return true;
  if (!record_ids.empty() && id.find(';') != std::string::npos) {
    std::size_t start = 0;
    while (start <= id.size()) {
      const std::size_t end = std::min(id.find(';', start), id.size());
      if (record_ids.count(id.substr(start, end - start))) return true;
      start = end + 1;
    }
  }
  auto for_trait = trait_variant_ids.find(trait);
  return for_trait != trait_variant_ids.end() && for_trait->second.count(variant_id) > 0;
}

void select_from_results(const std::string& results_path, double below, VariantSelection& selection,
                         std::vector<GenomicRegion>& regions) {
  ResultsReader reader(results_path, {"chromosome", "base_pair_location", "variant_id", "neg_log_10_p_value"});
  const std::size_t chromosome = reader.column_index("chromosome");
  const std::size_t position = reader.column_index("base_pair_location");
  const std::size_t variant_id = reader.column_index("variant_id");
  const std::size_t neg_log_10_p = reader.column_index("neg_log_10_p_value");
  // Compared on the -log10 scale, which stays exact where p itself underflows.
  const double threshold = -std::log10(below);
  std::set<std::string>& chosen = selection.trait_variant_ids[trait_of_results(results_path)];
  while (reader.next_row()) {
    if (!(reader.number(neg_log_10_p) > threshold)) continue;
    chosen.insert(std::string(reader.field(variant_id)));
    add_position(std::string(reader.field(chromosome)), reader.integer(position), regions);
  }
}

void select_sets_from_results(const std::string& set_results_path, double below, std::set<std::string>& set_names,
                              std::vector<GenomicRegion>& regions) {
  ResultsReader reader(set_results_path, {"set", "chromosome", "start", "end", "neg_log_10_overall_p"});
  const std::size_t name = reader.column_index("set");
  const std::size_t chromosome = reader.column_index("chromosome");
  const std::size_t start = reader.column_index("start");
  const std::size_t end = reader.column_index("end");
  const std::size_t neg_log_10_p = reader.column_index("neg_log_10_overall_p");
  const double threshold = -std::log10(below);
  while (reader.next_row()) {
    if (!(reader.number(neg_log_10_p) > threshold)) continue;
    set_names.insert(std::string(reader.field(name)));
    add_range(std::string(reader.field(chromosome)), reader.integer(start), reader.integer(end), regions);
  }
}

bool is_set_results_path(const std::string& path) {
  const std::string suffix = ".sets.tsv.gz";
  return path.size() > suffix.size() && path.compare(path.size() - suffix.size(), suffix.size(), suffix) == 0;
}

bool select_from_list(const std::string& list_path, ChromosomeCodes codes, VariantSelection& selection,
                      std::vector<GenomicRegion>& regions) {
  std::ifstream input(list_path);
  if (!input) {
    throw Error(ExitCode::usage, list_path, "cannot read the variant list", "check the path given to --variants");
  }
  bool indexed = true;
  std::string line;
  std::size_t line_number = 0;
  while (std::getline(input, line)) {
    ++line_number;
    const std::string entry = trim(line);
    if (entry.empty() || entry[0] == '#') continue;
    check_id_entry(entry, list_path + ", line " + std::to_string(line_number));
    selection.record_ids.insert(entry);
    const std::optional<AlleleKey> key = parse_allele_key(entry);
    if (!key) {
      indexed = false;
      continue;
    }
    std::string code = key->chromosome;
    if (codes == ChromosomeCodes::ssf) {
      auto mapped = map_chromosome_ssf(key->chromosome);
      if (mapped) code = *mapped;
    }
    selection.variant_ids.insert(code + "_" + std::to_string(key->position) + "_" + key->ref + "_" + key->alt);
    if (codes == ChromosomeCodes::ssf) {
      add_position(code, key->position, regions);
    } else {
      regions.push_back({key->chromosome, key->position, key->position});
    }
  }
  return indexed;
}

}  // namespace tamis
