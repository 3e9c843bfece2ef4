// Progress of a running scan: one redrawn line on a terminal, or a plain
// line in the log at most every 30 seconds otherwise. Every scan on a
// terminal, however short, ends with one final line.
#pragma once

#include <chrono>
#include <cstdint>
#include <cstdio>
#include <functional>
#include <optional>
#include <string>

namespace tamis {

enum class ProgressMode { silent, terminal, log_only };

using ProgressClock = std::function<std::chrono::steady_clock::time_point()>;

struct ProgressSettings {
  ProgressMode mode = ProgressMode::silent;
  std::optional<std::uint64_t> total_records;
  // Injected so that tests step time themselves instead of racing it.
  ProgressClock clock = [] { return std::chrono::steady_clock::now(); };
  std::FILE* terminal = stderr;
  double terminal_interval = 0.25;  // seconds between redraws
  double log_interval = 30.0;       // seconds between log lines
};

class ProgressDisplay {
 public:
  explicit ProgressDisplay(ProgressSettings settings);

  // Called from the serial writer after every block; draws when the
  // interval has passed since the last report.
  void update(std::uint64_t records_done);
  // Draws the final line (records done, rate, elapsed) and ends it.
  void finish(std::uint64_t records_done);

  // The text of one progress report (also used by tests).
  static std::string describe(std::uint64_t records_done, std::optional<std::uint64_t> total,
                              double elapsed_seconds);

 private:
  void report(std::uint64_t records_done, std::chrono::steady_clock::time_point now);

  ProgressSettings settings_;
  std::chrono::steady_clock::time_point start_;
  std::chrono::steady_clock::time_point last_report_;
};

// terminal when stderr is a terminal, log_only otherwise; silent when quiet.
ProgressMode choose_progress_mode(bool quiet);

}  // namespace tamis
