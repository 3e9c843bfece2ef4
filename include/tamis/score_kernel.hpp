// The blocked score test: every variant of a block at once, with the
// covariates projected out by one pass against the null model's basis.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "tamis/null_model.hpp"

namespace tamis {

struct ScoreResult {
  double u = 0.0;       // G' r
  double v = 0.0;       // variance of U under the null
  double chisq = 0.0;   // U^2 / V
  double log_p = 0.0;   // ln P(chi2_1 > chisq)
  double beta = 0.0;    // one-step estimate U / V' (V' = V / sigma^2 linear, V logistic)
  double se = 0.0;      // its SE: sqrt(sigma^2 / V') linear, 1 / sqrt(V') logistic; (beta/se)^2 = chisq
  bool testable = true; // false when V is zero (the variant lies in the covariate span);
                        // then chisq = log_p = beta = se = v = 0
};

// Reused per thread so that a scan allocates nothing per block.
struct ScoreScratch {
  std::vector<double> projections;  // (p + 1) x width accumulators
  std::vector<double> weighted_squares;
};

// Dosages that the genotype block holds as 0 but that stand for missing
// values, and the value each variant imputes for them: variant j's are the
// rows rows[starts[j]] .. rows[starts[j + 1] - 1], imputed as fills[j].
struct ImputedDosages {
  const std::uint32_t* rows = nullptr;
  const std::size_t* starts = nullptr;
  const double* fills = nullptr;
};

class ScoreKernel {
 public:
  // One row per analysis sample, in the null model's order.
  explicit ScoreKernel(const NullModel& model);
  // `row_count` rows, analysis sample s in row row_of_sample[s]; the other
  // rows weigh nothing, so a block gathered once for all genotype samples
  // serves every trait whose analysis samples are among them.
  ScoreKernel(const NullModel& model, const std::vector<std::size_t>& row_of_sample, std::size_t row_count);

  std::size_t row_count() const { return row_count_; }

  // `genotypes` is sample-major: the value of row s for variant j is
  // genotypes[s * width + j]. Missing values are either imputed already or
  // held as 0 and listed in `imputed`, which adds each one's imputed value
  // after the block's sums. Writes `width` results.
  //
  // Each variant's result depends only on its own column, never on the other
  // columns or the block width, so outputs are identical for any blocking.
  void compute(const double* genotypes, std::size_t width, ScoreScratch& scratch, ScoreResult* results,
               const ImputedDosages* imputed = nullptr) const;

 private:
  void add_imputed(const ImputedDosages& imputed, std::size_t width, double* proj, double* squares) const;

  const NullModel& model_;
  std::size_t row_count_ = 0;
  // Columns: W^1/2 Q (p columns) and r; row_count x (p + 1), row-major for the kernel loop.
  std::vector<double> projection_rows_;
  std::vector<double> weights_;  // W, per row
  std::size_t projection_width_ = 0;
};

}  // namespace tamis
