#include "scan/checkpoint.hpp"

#include <sys/stat.h>

#include <algorithm>
#include <cstdio>
#include <fstream>
#include <set>
#include <sstream>

#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

std::string describe_file(const std::string& path) {
  struct stat info;
  if (stat(path.c_str(), &info) != 0) return path + " (missing)";
  return path + " size " + std::to_string(info.st_size) + " modified " + std::to_string(info.st_mtime);
}

std::string join(const std::vector<std::string>& items) {
  std::string text;
  for (const std::string& item : items) text += (text.empty() ? "" : ",") + item;
  return text;
}

std::string number_text(double value) {
  char text[40];
  std::snprintf(text, sizeof text, "%.17g", value);
  return text;
}

}  // namespace

std::vector<std::string> describe_run(const ScanOptions& options, bool with_shard_index) {
  std::vector<std::string> lines;
  lines.push_back(std::string("version=") + TAMIS_VERSION);
  for (const std::string& path : options.genotype_paths) lines.push_back("genotypes=" + describe_file(path));
  lines.push_back("traits_table=" + describe_file(options.traits_path));
  lines.push_back("sample_column=" + options.table.sample_column);
  lines.push_back("missing_tokens=" + join(options.table.missing_tokens));
  lines.push_back("traits=" + join(options.traits));
  for (const auto& [trait, kind] : options.kind_overrides) {
    lines.push_back("trait_kind=" + trait + ":" + trait_kind_name(kind));
  }
  lines.push_back("covariates=" + join(options.covariates));
  if (!options.condition_on.empty()) lines.push_back("condition_on=" + join(options.condition_on));
  if (!options.interaction_with.empty()) {
    lines.push_back("interaction_with=" + options.interaction_with);
    lines.push_back(std::string("robust_errors=") + robust_errors_name(options.robust_errors));
  }
  lines.push_back(std::string("dosage_from=") + dosage_field_name(options.dosage_field));
  lines.push_back("confirm_below=" + number_text(options.confirm_below));
  lines.push_back("disagreement_flag=" + number_text(options.spread_flag));
  lines.push_back(std::string("binary_score=") + (options.binary_score == BinaryScore::plain ? "plain" : "spa"));
  lines.push_back("penalized_refit=" + std::to_string(static_cast<int>(options.penalized_refit)));
  lines.push_back(std::string("chromosome_codes=") +
                  (options.chromosome_codes == ChromosomeCodes::ssf ? "ssf" : "as-is"));
  lines.push_back("genome_assembly=" + options.genome_assembly);
  lines.push_back("records_per_block=" + std::to_string(options.records_per_block));
  lines.push_back("blocks_per_checkpoint=" + std::to_string(options.blocks_per_checkpoint));
  for (const GenomicRegion& region : options.regions) {
    lines.push_back("region=" + region.contig + ":" + std::to_string(region.first) + "-" + std::to_string(region.last));
  }
  const QcFloors& floors = options.floors;
  lines.push_back("floors=" + number_text(floors.minor_allele_frequency) + "," + number_text(floors.minor_allele_count) +
                  "," + number_text(floors.info) + "," + number_text(floors.call_rate) + "," + number_text(floors.hwe_p));
  if (!options.keep_samples_path.empty()) lines.push_back("keep_samples=" + describe_file(options.keep_samples_path));
  if (!options.drop_samples_path.empty()) lines.push_back("drop_samples=" + describe_file(options.drop_samples_path));
  lines.push_back("rank_normalize=" + join(options.rank_normalize));
  for (const std::string& path : options.relatedness_paths) {
    lines.push_back("relatedness=" + path + " md5 " + md5_hex_of_file(path));
  }
  lines.push_back("haploid_dosage=" + std::to_string(options.haploid_dosage));
  if (options.sets.active()) {
    const SetScanOptions& sets = options.sets;
    lines.push_back("sets=" + describe_file(sets.path));
    lines.push_back("set_options=" + number_text(sets.maf_ceiling) + "," + set_weighting_name(sets.weighting) + "," +
                    number_text(sets.collapse_mac) + "," + std::to_string(sets.max_variants) + "," +
                    number_text(sets.exact_below));
    if (!sets.only_sets.empty()) {
      lines.push_back("only_sets=" + join(std::vector<std::string>(sets.only_sets.begin(), sets.only_sets.end())));
    }
  }
  if (options.selection.active()) {
    std::vector<std::string> chosen(options.selection.variant_ids.begin(), options.selection.variant_ids.end());
    chosen.insert(chosen.end(), options.selection.record_ids.begin(), options.selection.record_ids.end());
    for (const auto& [trait, ids] : options.selection.trait_variant_ids) {
      for (const std::string& id : ids) chosen.push_back(trait + ":" + id);
    }
    lines.push_back("selection=" + std::to_string(chosen.size()) + " variants " + fingerprint_of(chosen));
  }
  if (options.shard_count > 0) {
    lines.push_back("shard_count=" + std::to_string(options.shard_count));
    if (with_shard_index) lines.push_back("shard=" + std::to_string(options.shard));
  }
  return lines;
}

std::string fingerprint_of(const std::vector<std::string>& description) {
  // 64-bit FNV-1a: enough to tell runs apart, not a security measure.
  std::uint64_t hash = 0xcbf29ce484222325ULL;
  for (const std::string& line : description) {
    for (unsigned char c : line + "\n") {
      hash ^= c;
      hash *= 0x100000001b3ULL;
    }
  }
  char text[17];
  std::snprintf(text, sizeof text, "%016llx", static_cast<unsigned long long>(hash));
  return text;
}

std::string checkpoint_path(const std::string& out_prefix) { return out_prefix + ".resume"; }
std::string sets_state_path(const std::string& out_prefix) { return out_prefix + ".resume-sets"; }

void save_checkpoint(const std::string& path, const CheckpointState& state) {
  std::ostringstream text;
  text << "# tamis scan checkpoint: rerun the same command with --resume to continue\n";
  for (const std::string& line : state.run_description) text << "run " << line << "\n";
  text << "blocks " << state.blocks << "\nrecords " << state.records << "\nalleles " << state.alleles << "\n";
  for (const auto& [trait, size] : state.compressed_sizes) text << "size " << trait << " " << size << "\n";
  for (const auto& [trait, size] : state.set_compressed_sizes) text << "setsize " << trait << " " << size << "\n";
  if (!state.sets_state_digest.empty()) text << "setstate " << state.sets_state_digest << "\n";
  for (const auto& [trait, tally] : state.tallies) {
    text << "tally " << trait << " " << tally.written << " " << tally.monomorphic << " "
         << tally.in_covariate_span << " " << tally.confirmed << " " << tally.discordant << " "
         << tally.confirm_not_converged << " " << tally.firth;
    for (std::uint64_t count : tally.filtered) text << " " << count;
    text << "\n";
  }
  PlainTextFile file(path);
  file.write(text.str());
  file.commit();
}

std::optional<CheckpointState> load_checkpoint(const std::string& path) {
  std::ifstream input(path);
  if (!input) return std::nullopt;
  CheckpointState state;
  std::string line;
  std::size_t line_number = 0;
  while (std::getline(input, line)) {
    ++line_number;
    if (line.empty() || line[0] == '#') continue;
    std::istringstream fields(line);
    std::string key;
    fields >> key;
    bool ok = true;
    if (key == "run") {
      state.run_description.push_back(line.substr(4));
    } else if (key == "blocks") {
      ok = static_cast<bool>(fields >> state.blocks);
    } else if (key == "records") {
      ok = static_cast<bool>(fields >> state.records);
    } else if (key == "alleles") {
      ok = static_cast<bool>(fields >> state.alleles);
    } else if (key == "size") {
      std::string trait;
      std::uint64_t size = 0;
      ok = static_cast<bool>(fields >> trait >> size);
      state.compressed_sizes[trait] = size;
    } else if (key == "setsize") {
      std::string trait;
      std::uint64_t size = 0;
      ok = static_cast<bool>(fields >> trait >> size);
      state.set_compressed_sizes[trait] = size;
    } else if (key == "setstate") {
      ok = static_cast<bool>(fields >> state.sets_state_digest);
    } else if (key == "tally") {
      std::string trait;
      TraitTally tally;
      ok = static_cast<bool>(fields >> trait >> tally.written >> tally.monomorphic >> tally.in_covariate_span >>
                             tally.confirmed >> tally.discordant >> tally.confirm_not_converged >> tally.firth);
      for (std::uint64_t& count : tally.filtered) ok = ok && static_cast<bool>(fields >> count);
      state.tallies[trait] = tally;
    } else {
      ok = false;
    }
    if (!ok) {
      throw Error(ExitCode::usage, path + ", line " + std::to_string(line_number),
                  "the checkpoint file is damaged", "remove it and run the scan again without --resume");
    }
  }
  return state;
}

std::vector<std::string> describe_differences(const std::vector<std::string>& saved,
                                              const std::vector<std::string>& current) {
  std::vector<std::string> differences;
  const std::set<std::string> saved_set(saved.begin(), saved.end());
  const std::set<std::string> current_set(current.begin(), current.end());
  for (const std::string& line : saved) {
    if (!current_set.count(line)) differences.push_back("interrupted run: " + line);
  }
  for (const std::string& line : current) {
    if (!saved_set.count(line)) differences.push_back("this run: " + line);
  }
  return differences;
}

}  // namespace tamis
