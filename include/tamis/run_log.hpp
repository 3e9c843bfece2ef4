// The run record PREFIX.log: appended and flushed as the run goes, so that a
// failed run still explains itself. Lines also go to stderr unless quiet.
#pragma once

#include <cstdio>
#include <string>

namespace tamis {

class RunLog {
 public:
  RunLog() = default;
  ~RunLog();
  RunLog(const RunLog&) = delete;
  RunLog& operator=(const RunLog&) = delete;

  // Starts writing PREFIX.log (replacing an older one). Throws tamis::Error (output).
  void open(const std::string& path);
  void set_echo(bool echo) { echo_ = echo; }

  void line(const std::string& text);        // to the log and, if echoing, stderr
  void detail(const std::string& text);      // to the log only
  const std::string& path() const { return path_; }

 private:
  std::FILE* file_ = nullptr;
  std::string path_;
  bool echo_ = true;
};

// The process-wide log of the current command (null before one is opened).
RunLog& current_log();

}  // namespace tamis
