#include "scan/sample_lists.hpp"

#include <fstream>
#include <set>

#include "tamis/errors.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

std::set<std::string> read_sample_list(const std::string& path) {
  std::ifstream input(path);
  if (!input) {
    throw Error(ExitCode::usage, path, "cannot read the sample list", "give a file with one sample ID per line");
  }
  std::set<std::string> ids;
  std::string line;
  while (std::getline(input, line)) {
    while (!line.empty() && (line.back() == '\r' || line.back() == ' ' || line.back() == '\t')) line.pop_back();
    const std::size_t start = line.find_first_not_of(" \t");
    if (start != std::string::npos && line[start] != '#') ids.insert(line.substr(start));
  }
  return ids;
}

void report_unknown_samples(const std::string& option, const std::set<std::string>& listed,
                            const std::vector<std::string>& samples) {
  const std::set<std::string> present(samples.begin(), samples.end());
  std::vector<std::string> unknown;
  for (const std::string& id : listed) {
    if (!present.count(id)) unknown.push_back(id);
  }
  if (unknown.empty()) return;
  std::string shown;
  for (std::size_t id_idx = 0; id_idx < unknown.size() && id_idx < 5; ++id_idx) shown += (id_idx ? ", " : "") + unknown[id_idx];
  current_log().line("note: " + std::to_string(unknown.size()) + " of the " + std::to_string(listed.size()) +
                     " IDs in " + option + " are not in the genotype files (" + shown +
                     (unknown.size() > 5 ? ", ..." : "") + ")");
}

}  // namespace

std::vector<bool> excluded_samples(const std::string& keep_path, const std::string& drop_path,
                                   const std::vector<std::string>& samples) {
  std::vector<bool> excluded;
  if (keep_path.empty() && drop_path.empty()) return excluded;
  excluded.assign(samples.size(), false);
  if (!keep_path.empty()) {
    const std::set<std::string> keep = read_sample_list(keep_path);
    report_unknown_samples("--keep-samples", keep, samples);
    for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) {
      if (!keep.count(samples[sample_idx])) excluded[sample_idx] = true;
    }
  }
  if (!drop_path.empty()) {
    const std::set<std::string> drop = read_sample_list(drop_path);
    report_unknown_samples("--drop-samples", drop, samples);
    for (std::size_t sample_idx = 0; sample_idx < samples.size(); ++sample_idx) {
      if (drop.count(samples[sample_idx])) excluded[sample_idx] = true;
    }
  }
  return excluded;
}

}  // namespace tamis
