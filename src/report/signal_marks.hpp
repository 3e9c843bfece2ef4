// What `tamis signals` adds to a regional plot: the leads of a trait's
// independent signals (PREFIX.TRAIT.signals.tsv) and the members of their
// credible sets (PREFIX.TRAIT.credible.tsv). Both files are read by column
// name, so columns may be added to them.
#pragma once

#include <cstdint>
#include <set>
#include <string>
#include <vector>

namespace tamis::report {

struct SignalLead {
  std::string signal;
  std::string chromosome;  // as the results file writes it
  std::int64_t position = 0;
  std::string variant_id;
};

struct SignalMarks {
  std::string signals_path, credible_path;  // empty: no such file for the trait
  std::vector<SignalLead> leads;
  std::set<std::string> in_95, in_99;  // variant IDs in some signal's 95% / 99% credible set
  bool empty() const { return signals_path.empty() && credible_path.empty(); }
};

// The files of `trait` under the --out prefix of `tamis signals`; a file
// that does not exist is left out. Throws tamis::Error (results_input) for a
// file that lacks a column or holds a value other than 0 or 1 in in_95/in_99.
SignalMarks load_signal_marks(const std::string& prefix, const std::string& trait);

std::string signals_file_path(const std::string& prefix, const std::string& trait);
std::string credible_file_path(const std::string& prefix, const std::string& trait);

}  // namespace tamis::report
