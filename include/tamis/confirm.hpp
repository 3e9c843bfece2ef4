// Confirmation refits: the full model with the variant added, tested by Wald
// and likelihood ratio.
#pragma once

#include <Eigen/Dense>

#include "tamis/null_model.hpp"

namespace tamis {

struct ConfirmResult {
  double beta = 0.0;         // the variant's coefficient in the full fit
  double se = 0.0;           // its standard error
  double wald_chisq = 0.0;   // (beta / se)^2
  double wald_log_p = 0.0;   // ln p: Student's t, n - p - 1 df (linear); chi2_1 (logistic)
  double lrt_chisq = 0.0;    // n log(RSS0/RSS1) (linear); 2 (l1 - l0) (logistic)
  double lrt_log_p = 0.0;    // ln P(chi2_1 > lrt_chisq)
  int iterations = 0;
  bool converged = true;
};

// `genotype` holds the variant's imputed dosages for the null model's samples.
// Logistic refits start from (null coefficients, 0), halve steps when the
// deviance rises and stop after 100 iterations; a diverging fit (separation)
// returns converged = false with the last finite values, never NaN or inf.
// A genotype in the covariate span (not estimable) returns converged = false
// with every statistic 0 (ln p = 0).
ConfirmResult confirm_variant(const NullModel& model, const Eigen::VectorXd& genotype);

}  // namespace tamis
