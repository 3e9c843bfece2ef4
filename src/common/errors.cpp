#include "tamis/errors.hpp"

namespace tamis {

std::string format_error_text(const std::string& where, const std::string& what,
                              const std::string& fix) {
  std::string text;
  if (!where.empty()) text += where + ": ";
  text += what;
  if (!fix.empty()) text += "\n  fix: " + fix;
  return text;
}

Error::Error(ExitCode code, std::string where, std::string what, std::string fix)
    : std::runtime_error(format_error_text(where, what, fix)),
      code_(code),
      where_(std::move(where)),
      problem_(std::move(what)),
      fix_(std::move(fix)) {}

}  // namespace tamis
