// Score tests of a gene-environment interaction for every variant of a
// block: the interaction d in y = X b + g c + (g . E) d, with the variant's
// main effect c fitted under the null hypothesis d = 0, and the joint score
// test of (c, d) against the null model. Robust (sandwich) score variances
// where asked for.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <vector>

#include "tamis/interaction.hpp"
#include "tamis/null_model.hpp"

namespace tamis {

struct InteractionScore {
  bool testable = true;     // false when g or g . E adds nothing to the covariates (all below 0)
  double chisq = 0.0;       // U' V^-1 U, V robust (model-based with RobustErrors::off); k df
  double log_p = 0.0;
  double model_chisq = 0.0; // the same with the model-based V
  double model_log_p = 0.0;
  double joint_log_p = 0.0; // (c, d) against the null model, k + 1 df, same variance as chisq
  double joint_model_log_p = 0.0;  // the same with the model-based variance
  // The one-step estimate of d (its first exposure column) and its SE from
  // the same variance as chisq: for one exposure column (beta / se)^2 = chisq.
  double beta = 0.0, se = 0.0;
  // c fitted under d = 0 (least squares exactly; a few Newton steps for
  // logistic models), and its SE from the same kind of variance.
  double main_beta = 0.0, main_se = 0.0;
};

class InteractionScoreKernel {
 public:
  // `exposure`: E's columns over the null model's samples (n x k), each one
  // a column of the null design. Analysis sample s sits in row
  // row_of_sample[s] of the blocks given to compute; other rows are ignored.
  InteractionScoreKernel(const NullModel& model, const Eigen::MatrixXd& exposure,
                         const std::vector<std::size_t>& row_of_sample, RobustErrors robust);

  // `genotypes` is sample-major (row s, variant j at genotypes[s * width + j])
  // with every dosage imputed. Each variant's result depends on its own
  // column only, never on the block's other columns or width.
  void compute(const double* genotypes, std::size_t width, InteractionScore* results) const;

 private:
  void compute_linear(const double* genotypes, std::size_t width, InteractionScore* results) const;
  void compute_logistic_variant(const double* genotypes, std::size_t width, std::size_t variant,
                                InteractionScore& out) const;

  const NullModel& model_;
  RobustErrors robust_;
  std::size_t k_ = 0;  // exposure columns
  std::size_t p_ = 0;  // null model columns
  // Per analysis sample, in analysis order: its block row, its basis row
  // (p, W^1/2 Q for logistic models), residual, exposure values (k), the
  // null hat-matrix leverage |Q_s|^2 and, for logistic models, 1 / sqrt(w).
  std::vector<std::size_t> rows_;
  std::vector<double> basis_;     // n x p
  std::vector<double> exposure_;  // n x k
  std::vector<double> residual_, leverage_, inverse_root_weight_;
  Eigen::VectorXd null_eta_;  // X b of the logistic null fit
};

}  // namespace tamis
