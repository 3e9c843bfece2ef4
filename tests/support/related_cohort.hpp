// Simulated cohorts of related samples for the mixed-model tests, and the
// files their R reference scripts read (tests/reference/*.R).
#pragma once

#include <Eigen/Dense>
#include <cmath>
#include <cstdint>
#include <iomanip>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "support/test_support.hpp"
#include "tamis/confirm.hpp"
#include "tamis/relatedness.hpp"

namespace tamis::testing {

// Draws generated deterministically (std::mt19937_64 is specified bit for
// bit; the normal draws are our own Box-Muller so no library choice enters).
class Random {
 public:
  explicit Random(std::uint64_t seed) : engine_(seed) {}
  double uniform() { return (static_cast<double>(engine_() >> 11) + 0.5) * 0x1.0p-53; }
  double normal() {
    const double radius = std::sqrt(-2.0 * std::log(uniform()));
    return radius * std::cos(6.283185307179586 * uniform());
  }
  int below(int count) { return static_cast<int>(uniform() * count); }
  int allele(double frequency) { return uniform() < frequency ? 1 : 0; }

 private:
  std::mt19937_64 engine_;
};

struct Cohort {
  Eigen::VectorXd y;
  Eigen::MatrixXd design;    // intercept, c1, c2
  Eigen::MatrixXd variants;  // n x K dosages
  std::vector<int> family;   // group label per sample (the R data set's random effect)
  SparseRelatedness relatedness;
  int size() const { return static_cast<int>(y.size()); }
};

inline std::vector<std::string> design_names() { return {"intercept", "c1", "c2"}; }

inline Eigen::MatrixXd dense_relatedness(const SparseRelatedness& relatedness) {
  const auto n = static_cast<Eigen::Index>(relatedness.sample_count);
  Eigen::MatrixXd a = Eigen::MatrixXd::Zero(n, n);
  for (Eigen::Index sample = 0; sample < n; ++sample) a(sample, sample) = relatedness.diagonal[sample];
  for (const auto& pair : relatedness.pairs) {
    a(pair.first, pair.second) = pair.value;
    a(pair.second, pair.first) = pair.value;
  }
  return a;
}

// All 17 significant digits, so that R reads back the same doubles.
inline std::string number_text(double value) {
  std::ostringstream text;
  text << std::setprecision(17) << value;
  return text.str();
}

// DIR/data.tsv: family, y, c1, c2, g1, g2, ... (header line).
inline std::string write_data(const Cohort& cohort, const std::string& dir) {
  std::ostringstream text;
  text << "family\ty\tc1\tc2";
  for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant) text << "\tg" << variant + 1;
  text << "\n";
  for (int sample = 0; sample < cohort.size(); ++sample) {
    text << "f" << cohort.family[sample] << "\t" << number_text(cohort.y[sample]) << "\t"
         << number_text(cohort.design(sample, 1)) << "\t" << number_text(cohort.design(sample, 2));
    for (Eigen::Index variant = 0; variant < cohort.variants.cols(); ++variant)
      text << "\t" << number_text(cohort.variants(sample, variant));
    text << "\n";
  }
  const std::string path = dir + "/data.tsv";
  write_text_file(path, text.str());
  return path;
}

// DIR/pairs.tsv: i, j, value (1-based): the diagonal and each pair once.
inline std::string write_pairs(const SparseRelatedness& relatedness, const std::string& dir) {
  std::ostringstream text;
  text << "i\tj\tvalue\n";
  for (std::size_t sample = 0; sample < relatedness.sample_count; ++sample)
    text << sample + 1 << "\t" << sample + 1 << "\t" << number_text(relatedness.diagonal[sample]) << "\n";
  for (const auto& pair : relatedness.pairs)
    text << pair.first + 1 << "\t" << pair.second + 1 << "\t" << number_text(pair.value) << "\n";
  const std::string path = dir + "/pairs.tsv";
  write_text_file(path, text.str());
  return path;
}

// A refit of a genotype in the covariate span: not estimable, every statistic 0.
inline void expect_not_estimable(const ConfirmResult& result) {
  EXPECT_FALSE(result.converged);
  EXPECT_EQ(result.wald_chisq, 0.0);
  EXPECT_EQ(result.lrt_chisq, 0.0);
  EXPECT_EQ(result.wald_log_p, 0.0);
  EXPECT_EQ(result.lrt_log_p, 0.0);
}

}  // namespace tamis::testing
