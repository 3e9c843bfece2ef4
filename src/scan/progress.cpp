#include "scan/progress.hpp"

#include <unistd.h>

#include <cmath>
#include <cstdio>
#include <utility>

#include "tamis/run_log.hpp"

namespace tamis {
namespace {

std::string format_duration(double seconds) {
  const long total = std::lround(std::max(0.0, seconds));
  char text[32];
  if (total >= 3600) {
    std::snprintf(text, sizeof text, "%ld:%02ld:%02ld", total / 3600, (total / 60) % 60, total % 60);
  } else {
    std::snprintf(text, sizeof text, "%ld:%02ld", total / 60, total % 60);
  }
  return text;
}

double seconds_between(std::chrono::steady_clock::time_point from, std::chrono::steady_clock::time_point to) {
  return std::chrono::duration<double>(to - from).count();
}

}  // namespace

ProgressMode choose_progress_mode(bool quiet) {
  if (quiet) return ProgressMode::silent;
  return isatty(STDERR_FILENO) ? ProgressMode::terminal : ProgressMode::log_only;
}

ProgressDisplay::ProgressDisplay(ProgressSettings settings)
    : settings_(std::move(settings)), start_(settings_.clock()), last_report_(start_) {}

std::string ProgressDisplay::describe(std::uint64_t records_done, std::optional<std::uint64_t> total,
                                      double elapsed_seconds) {
  const double rate = elapsed_seconds > 0 ? static_cast<double>(records_done) / elapsed_seconds : 0.0;
  char text[160];
  int length = std::snprintf(text, sizeof text, "progress: %llu records", static_cast<unsigned long long>(records_done));
  if (total && *total > 0) {
    const double share = std::min(1.0, static_cast<double>(records_done) / static_cast<double>(*total));
    length += std::snprintf(text + length, sizeof text - length, " of %llu (%.1f%%)",
                            static_cast<unsigned long long>(*total), 100.0 * share);
  }
  length += std::snprintf(text + length, sizeof text - length, ", %.0f records/s, elapsed %s", rate,
                          format_duration(elapsed_seconds).c_str());
  if (total && rate > 0 && *total >= records_done) {
    const double remaining = static_cast<double>(*total - records_done) / rate;
    std::snprintf(text + length, sizeof text - length, ", about %s left", format_duration(remaining).c_str());
  }
  return text;
}

void ProgressDisplay::update(std::uint64_t records_done) {
  if (settings_.mode == ProgressMode::silent) return;
  const auto now = settings_.clock();
  const double interval =
      settings_.mode == ProgressMode::terminal ? settings_.terminal_interval : settings_.log_interval;
  if (seconds_between(last_report_, now) < interval) return;
  report(records_done, now);
}

void ProgressDisplay::finish(std::uint64_t records_done) {
  if (settings_.mode == ProgressMode::silent) return;
  report(records_done, settings_.clock());
  // The final line stays on screen, above the summary that follows.
  if (settings_.mode == ProgressMode::terminal) std::fputc('\n', settings_.terminal);
  std::fflush(settings_.terminal);
}

void ProgressDisplay::report(std::uint64_t records_done, std::chrono::steady_clock::time_point now) {
  last_report_ = now;
  const std::string text = describe(records_done, settings_.total_records, seconds_between(start_, now));
  if (settings_.mode == ProgressMode::terminal) {
    // \33[K clears what a longer earlier line left behind.
    std::fprintf(settings_.terminal, "\r%s\33[K", text.c_str());
    std::fflush(settings_.terminal);
  } else {
    current_log().detail(text);
  }
}

}  // namespace tamis
