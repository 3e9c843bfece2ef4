#include "tamis/run_log.hpp"

#include <cerrno>
#include <cstring>

#include "tamis/errors.hpp"

namespace tamis {

RunLog::~RunLog() {
  if (file_) std::fclose(file_);
}

void RunLog::open(const std::string& path) {
  if (file_) std::fclose(file_);
  file_ = std::fopen(path.c_str(), "w");
  if (!file_) {
    throw Error(ExitCode::output, path, std::string("cannot create the run log: ") + std::strerror(errno),
                "check that the --out directory is writable");
  }
  path_ = path;
}

void RunLog::line(const std::string& text) {
  if (echo_) std::fprintf(stderr, "%s\n", text.c_str());
  detail(text);
}

void RunLog::detail(const std::string& text) {
  if (!file_) return;
  std::fprintf(file_, "%s\n", text.c_str());
  std::fflush(file_);
}

RunLog& current_log() {
  static RunLog log;
  return log;
}

}  // namespace tamis
