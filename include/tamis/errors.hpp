// Error reporting shared by every stage.
//
// Bad input produces one message that names the file, the place (line, or
// chrom:pos and record number), what was expected and a possible fix. Every
// failure maps to one exit code from the table below; the README repeats it.
#pragma once

#include <stdexcept>
#include <string>

namespace tamis {

enum class ExitCode : int {
  success = 0,
  internal = 1,      // a bug in tamis: an assertion or an unexpected exception
  usage = 2,         // bad or conflicting command-line options
  table_input = 3,   // the trait and covariate table
  genotype_input = 4,  // a VCF / VCF.gz / BCF file, its index, or its records
  model = 5,         // a trait or covariate set that cannot be analysed
  output = 6,        // results could not be written (permissions, full disk)
  results_input = 7,  // a results file read back (report): damaged, edited or not from tamis
  interrupted = 130  // stopped by SIGINT (other signals: 128 + the signal, e.g. 143 for SIGTERM)
};

// The exception every stage throws for a problem the user can fix.
// `where` is "FILE, line 12" or "FILE, record 8 (chr2:1234567)"; it may be
// empty when no single place is to blame.
class Error : public std::runtime_error {
 public:
  Error(ExitCode code, std::string where, std::string what, std::string fix = "");

  ExitCode code() const noexcept { return code_; }
  const std::string& where() const noexcept { return where_; }
  const std::string& problem() const noexcept { return problem_; }
  const std::string& fix() const noexcept { return fix_; }

 private:
  ExitCode code_;
  std::string where_;
  std::string problem_;
  std::string fix_;
};

// Formats "WHERE: WHAT\n  fix: FIX" (parts left out when empty).
std::string format_error_text(const std::string& where, const std::string& what,
                              const std::string& fix);

}  // namespace tamis
