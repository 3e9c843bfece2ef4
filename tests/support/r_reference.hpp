// Runs a script of tests/reference in R and compares against the
// `key<TAB>value` lines it prints, keeping the largest relative deviation on
// record so that each reference test can print its margins.
#pragma once

#include <gtest/gtest.h>

#include <cmath>
#include <iostream>
#include <map>
#include <string>

#include "support/test_support.hpp"

namespace tamis::testing {

inline bool have_rscript() { return run_command("command -v Rscript > /dev/null 2>&1") == 0; }

// Runs tests/reference/SCRIPT with the arguments and reads its key/value lines.
inline std::map<std::string, std::string> run_reference(const std::string& script, const std::string& arguments) {
  int status = 0;
  const std::string output =
      capture_command("Rscript '" + source_dir() + "/tests/reference/" + script + "' " + arguments, &status);
  EXPECT_EQ(status, 0) << output;
  std::map<std::string, std::string> values;
  for (const std::string& line : lines_of(output)) {
    const auto fields = split_fields(line);
    if (fields.size() == 2) values[fields[0]] = fields[1];
  }
  return values;
}

inline double value_of(const std::map<std::string, std::string>& values, const std::string& key) {
  const auto found = values.find(key);
  if (found == values.end()) {
    ADD_FAILURE() << "the reference run printed no " << key;
    return std::nan("");
  }
  return std::stod(found->second);
}

// The largest relative deviation seen since the last report.
struct Deviation {
  double largest = 0.0;
  std::string key;
};
inline Deviation largest_deviation;

// |actual - expected| <= tolerance |expected|.
inline void expect_relative(double actual, double expected, double tolerance, const std::string& what) {
  EXPECT_NEAR(actual, expected, tolerance * std::fabs(expected)) << what;
  const double deviation = std::fabs(actual - expected) / std::fabs(expected);
  if (deviation > largest_deviation.largest) largest_deviation = {deviation, what};
}

// The same against the reference run's value under `key`.
inline void expect_reference(double actual, const std::map<std::string, std::string>& reference,
                             const std::string& key, double tolerance) {
  expect_relative(actual, value_of(reference, key), tolerance, key);
}

inline void report_largest_deviation(const std::string& reference) {
  std::cout << "largest relative deviation from " << reference << ": " << largest_deviation.largest << " ("
            << largest_deviation.key << ")\n";
  largest_deviation = {};
}

}  // namespace tamis::testing
