// One pass over a results file, keeping what the report needs.
#include "report/trait_results.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <fstream>
#include <limits>
#include <string_view>
#include <unordered_map>

#include "tamis/errors.hpp"
#include "tamis/results_reader.hpp"

namespace tamis::report {

namespace {

constexpr double genome_wide_p = 5e-8;    // common practice
constexpr double discordance_log10 = 1.0;  // the summary's n_discordant cut
// Rows whose -log10 p lies this far under a threshold cannot pass it even
// after the six-digit rounding of p_value, so their p text is not parsed.
constexpr double threshold_margin_log10 = 0.01;

bool is_ssf_code(const std::string& name) {
  if (name.empty() || name.size() > 2 || name[0] == '0') return false;
  for (char digit : name) {
    if (digit < '0' || digit > '9') return false;
  }
  int code = std::stoi(name);
  return code >= 1 && code <= 25;
}

// Column positions looked up once per file.
struct ColumnPlaces {
  std::size_t chromosome, position, p_value, neg_log_10_p, score_chisq, test, spread, beta,
      variant_id, rsid;
  explicit ColumnPlaces(const ResultsReader& reader)
      : chromosome(reader.column_index("chromosome")),
        position(reader.column_index("base_pair_location")),
        p_value(reader.column_index("p_value")),
        neg_log_10_p(reader.column_index("neg_log_10_p_value")),
        score_chisq(reader.column_index("score_chisq")),
        test(reader.column_index("test")),
        spread(reader.column_index("log10p_spread")),
        beta(reader.column_index("beta")),
        variant_id(reader.column_index("variant_id")),
        rsid(reader.column_index("rsid")) {}
};

float float_or_nan(const std::optional<double>& value) {
  return value ? static_cast<float>(*value) : std::numeric_limits<float>::quiet_NaN();
}

bool row_passes(const ResultsReader& reader, const ColumnPlaces& columns, double neg_log_10_p,
                double threshold) {
  if (std::isnan(neg_log_10_p) || neg_log_10_p < -std::log10(threshold) - threshold_margin_log10) {
    return false;
  }
  std::optional<bool> below = p_text_is_below(reader.field(columns.p_value), threshold);
  if (!below) {
    throw Error(ExitCode::results_input, reader.place() + ", column p_value",
                "expected a p-value, found '" + std::string(reader.field(columns.p_value)) + "'",
                "the line is damaged or the file was edited; restore it from the scan's output");
  }
  return *below;
}

LeadCandidate make_candidate(const ResultsReader& reader, const ColumnPlaces& columns,
                             std::size_t variant_idx, double neg_log_10_p) {
  LeadCandidate candidate;
  candidate.variant_idx = variant_idx;
  candidate.neg_log_10_p = neg_log_10_p;
  candidate.p_value_text = reader.field(columns.p_value);
  candidate.neg_log_10_p_text = reader.field(columns.neg_log_10_p);
  candidate.beta_text = reader.field(columns.beta);
  candidate.variant_id = reader.field(columns.variant_id);
  candidate.rsid = reader.field(columns.rsid);
  return candidate;
}

std::string unquote_yaml_scalar(std::string text) {
  while (!text.empty() && (text.back() == ' ' || text.back() == '\r')) text.pop_back();
  std::size_t first = text.find_first_not_of(' ');
  text = first == std::string::npos ? "" : text.substr(first);
  if (text.size() >= 2 && text.front() == '[' && text.back() == ']') {
    text = unquote_yaml_scalar(text.substr(1, text.find_first_of(",]") - 1));
  }
  if (text.size() >= 2 && text.front() == '"' && text.back() == '"') {
    std::string plain;
    for (std::size_t idx = 1; idx + 1 < text.size(); ++idx) {
      if (text[idx] == '\\' && idx + 2 < text.size()) {
        char escaped = text[++idx];
        plain += escaped == 'n' ? '\n' : escaped == 't' ? '\t' : escaped;
      } else {
        plain += text[idx];
      }
    }
    return plain;
  }
  if (text.size() >= 2 && text.front() == '\'' && text.back() == '\'') return text.substr(1, text.size() - 2);
  return text;
}

// The first trait_description entry of a GWAS-SSF sidecar, inline or as a list.
std::string read_sidecar_trait(const std::string& sidecar_path) {
  std::ifstream sidecar(sidecar_path);
  std::string line;
  const std::string key = "trait_description:";
  while (std::getline(sidecar, line)) {
    if (line.compare(0, key.size(), key) != 0) continue;
    std::string inline_value = unquote_yaml_scalar(line.substr(key.size()));
    if (!inline_value.empty()) return inline_value;
    if (std::getline(sidecar, line)) {
      std::size_t dash = line.find("- ");
      if (dash != std::string::npos && line.find_first_not_of(' ') == dash) {
        return unquote_yaml_scalar(line.substr(dash + 2));
      }
    }
    return "";
  }
  return "";
}

std::string strip_results_suffix(const std::string& name) {
  for (const char* suffix : {".tsv.gz", ".tsv.bgz", ".tsv", ".gz"}) {
    const std::string ending(suffix);
    if (name.size() > ending.size() && name.compare(name.size() - ending.size(), ending.size(), ending) == 0) {
      return name.substr(0, name.size() - ending.size());
    }
  }
  return name;
}

}  // namespace

std::uint32_t ContigIndexer::index_of(std::string_view name, std::vector<std::string>& names) {
  if (!names.empty() && name == names[last_index_]) return last_index_;
  auto found = indices_.find(std::string(name));
  if (found == indices_.end()) {
    found = indices_.emplace(std::string(name), static_cast<std::uint32_t>(names.size())).first;
    names.emplace_back(name);
  }
  last_index_ = found->second;
  return last_index_;
}

void order_chromosomes(TraitResults& results) {
  const auto& names = results.chromosome_names;
  if (!std::all_of(names.begin(), names.end(), is_ssf_code)) return;
  std::vector<std::uint32_t> order(names.size());
  for (std::uint32_t idx = 0; idx < order.size(); ++idx) order[idx] = idx;
  std::sort(order.begin(), order.end(), [&](std::uint32_t left, std::uint32_t right) {
    return std::stoi(names[left]) < std::stoi(names[right]);
  });
  std::vector<std::uint32_t> new_index_of(names.size());
  std::vector<std::string> sorted_names;
  for (std::uint32_t rank = 0; rank < order.size(); ++rank) {
    new_index_of[order[rank]] = rank;
    sorted_names.push_back(names[order[rank]]);
  }
  for (std::uint32_t& chromosome : results.chromosome_of) chromosome = new_index_of[chromosome];
  results.chromosome_names = std::move(sorted_names);
}

std::optional<bool> p_text_is_below(std::string_view p_text, double threshold) {
  double value = 0.0;
  auto [end, error] = std::from_chars(p_text.data(), p_text.data() + p_text.size(), value);
  if (p_text.empty() || end != p_text.data() + p_text.size()) return std::nullopt;
  if (error == std::errc::result_out_of_range) {
    // Too small for a double (the writer prints these from their logarithm).
    if (p_text.find("e-") != std::string_view::npos || p_text.find("E-") != std::string_view::npos) {
      return true;
    }
    return false;
  }
  if (error != std::errc()) return std::nullopt;
  return value < threshold;
}

std::string chromosome_display_name(const std::string& chromosome) {
  if (chromosome == "23") return "X";
  if (chromosome == "24") return "Y";
  if (chromosome == "25") return "MT";
  return chromosome;
}

ResultsProvenance find_provenance(const std::string& results_path) {
  const std::size_t slash = results_path.find_last_of('/');
  const std::string directory = slash == std::string::npos ? "" : results_path.substr(0, slash + 1);
  const std::string stem = strip_results_suffix(results_path.substr(directory.size()));

  ResultsProvenance provenance;
  provenance.trait = read_sidecar_trait(results_path + "-meta.yaml");
  std::string prefix;
  const std::string trait_ending = "." + provenance.trait;
  if (!provenance.trait.empty() && stem.size() > trait_ending.size() &&
      stem.compare(stem.size() - trait_ending.size(), trait_ending.size(), trait_ending) == 0) {
    prefix = stem.substr(0, stem.size() - trait_ending.size());
  } else {
    const std::size_t dot = stem.find_last_of('.');
    prefix = dot == std::string::npos ? stem : stem.substr(0, dot);
    if (provenance.trait.empty()) provenance.trait = dot == std::string::npos ? stem : stem.substr(dot + 1);
  }
  provenance.log_path = directory + prefix + ".log";
  return provenance;
}

TraitResults load_trait_results(const std::string& path, double lead_threshold) {
  TraitResults results;
  results.source_path = path;
  ResultsProvenance provenance = find_provenance(path);
  results.trait = provenance.trait;
  results.log_path = provenance.log_path;

  ResultsReader reader(path);
  const ColumnPlaces columns(reader);
  ContigIndexer contigs;
  while (reader.next_row()) {
    const std::size_t variant_idx = results.n_rows++;
    results.chromosome_of.push_back(contigs.index_of(reader.field(columns.chromosome), results.chromosome_names));
    results.position_of.push_back(reader.integer(columns.position));
    const std::optional<double> neg_log_10_p = reader.optional_number(columns.neg_log_10_p);
    results.neg_log_10_p_of.push_back(float_or_nan(neg_log_10_p));
    results.score_chisq_of.push_back(float_or_nan(reader.optional_number(columns.score_chisq)));

    const double significance = neg_log_10_p.value_or(std::nan(""));
    if (neg_log_10_p) results.max_neg_log_10_p = std::max(results.max_neg_log_10_p, *neg_log_10_p);
    if (row_passes(reader, columns, significance, genome_wide_p)) ++results.n_below_genome_wide;
    if (row_passes(reader, columns, significance, lead_threshold)) {
      results.candidates.push_back(make_candidate(reader, columns, variant_idx, significance));
    }
    if (reader.field(columns.test) != "score") {
      std::optional<double> spread = reader.optional_number(columns.spread);
      if (spread && *spread > discordance_log10) ++results.n_discordant;
    }
  }
  order_chromosomes(results);
  return results;
}

}  // namespace tamis::report
