// Progress of a running scan: one redrawn line on a terminal, or a plain
// line in the log at most every 30 seconds otherwise.
#pragma once

#include <chrono>
#include <cstdint>
#include <optional>
#include <string>

namespace tamis {

enum class ProgressMode { silent, terminal, log_only };

class ProgressDisplay {
 public:
  ProgressDisplay(ProgressMode mode, std::optional<std::uint64_t> total_records);

  // Called from the serial writer after every block.
  void update(std::uint64_t records_done);
  // Ends the redrawn line, if one was drawn.
  void finish();

  // The text of one progress report (also used by tests).
  static std::string describe(std::uint64_t records_done, std::optional<std::uint64_t> total,
                              double elapsed_seconds);

 private:
  ProgressMode mode_;
  std::optional<std::uint64_t> total_;
  std::chrono::steady_clock::time_point start_;
  std::chrono::steady_clock::time_point last_report_;
  bool drew_line_ = false;
};

// terminal when stderr is a terminal, log_only otherwise; silent when quiet.
ProgressMode choose_progress_mode(bool quiet);

}  // namespace tamis
