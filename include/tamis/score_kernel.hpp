// The blocked score test: every variant of a block at once, with the
// covariates projected out by one pass against the null model's basis.
#pragma once

#include <cstddef>
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

class ScoreKernel {
 public:
  explicit ScoreKernel(const NullModel& model);

  // `genotypes` is sample-major: value for analysis sample s and variant j is
  // genotypes[s * width + j], samples in the null model's order, missing
  // values already imputed. Writes `width` results.
  //
  // Each variant's result depends only on its own column, never on the other
  // columns or the block width, so outputs are identical for any blocking.
  void compute(const double* genotypes, std::size_t width, ScoreScratch& scratch,
               ScoreResult* results) const;

 private:
  const NullModel& model_;
  // Columns: W^1/2 Q (p columns) and r; n x (p + 1), row-major for the kernel loop.
  std::vector<double> projection_rows_;
  std::size_t projection_width_ = 0;
};

}  // namespace tamis
