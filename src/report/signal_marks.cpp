#include "report/signal_marks.hpp"

#include <fstream>

#include "tamis/errors.hpp"
#include "tamis/results_reader.hpp"

namespace tamis::report {

namespace {

bool file_exists(const std::string& path) { return std::ifstream(path).good(); }

bool membership(const ResultsReader& reader, std::size_t column, const char* name) {
  const std::string_view flag = reader.field(column);
  if (flag != "0" && flag != "1") {
    throw Error(ExitCode::results_input, reader.place() + ", column " + name,
                "expected 1 (a member of the credible set) or 0, found '" + std::string(flag) + "'",
                "the file is damaged or was edited; write it again with tamis signals");
  }
  return flag == "1";
}

void read_signal_leads(const std::string& path, SignalMarks& marks) {
  ResultsReader reader(path, {"signal", "chromosome", "base_pair_location", "variant_id"});
  const std::size_t signal = reader.column_index("signal");
  const std::size_t chromosome = reader.column_index("chromosome");
  const std::size_t position = reader.column_index("base_pair_location");
  const std::size_t variant_id = reader.column_index("variant_id");
  while (reader.next_row()) {
    marks.leads.push_back({std::string(reader.field(signal)), std::string(reader.field(chromosome)),
                           reader.integer(position), std::string(reader.field(variant_id))});
  }
}

void read_credible_members(const std::string& path, SignalMarks& marks) {
  ResultsReader reader(path, {"signal", "variant_id", "in_95", "in_99"});
  const std::size_t variant_id = reader.column_index("variant_id");
  const std::size_t in_95 = reader.column_index("in_95");
  const std::size_t in_99 = reader.column_index("in_99");
  while (reader.next_row()) {
    const std::string id(reader.field(variant_id));
    if (membership(reader, in_95, "in_95")) marks.in_95.insert(id);
    if (membership(reader, in_99, "in_99")) marks.in_99.insert(id);
  }
}

}  // namespace

std::string signals_file_path(const std::string& prefix, const std::string& trait) {
  return prefix + "." + trait + ".signals.tsv";
}

std::string credible_file_path(const std::string& prefix, const std::string& trait) {
  return prefix + "." + trait + ".credible.tsv";
}

SignalMarks load_signal_marks(const std::string& prefix, const std::string& trait) {
  SignalMarks marks;
  const std::string signals = signals_file_path(prefix, trait);
  const std::string credible = credible_file_path(prefix, trait);
  if (file_exists(signals)) {
    marks.signals_path = signals;
    read_signal_leads(signals, marks);
  }
  if (file_exists(credible)) {
    marks.credible_path = credible;
    read_credible_members(credible, marks);
  }
  return marks;
}

}  // namespace tamis::report
