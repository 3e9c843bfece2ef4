// Firth's penalised-likelihood refit of a binary trait's full model [X g]
// (Firth 1993, Biometrika 80:27-38; Heinze & Schemper 2002, Stat Med
// 21:2409-2419). The penalised log-likelihood
//   l*(b) = l(b) + 1/2 ln |I(b)|,   I(b) = [X g]' W(b) [X g],
// has a finite maximum even when the variant separates cases from controls
// (for example, when every carrier is a case).
#pragma once

#include <Eigen/Dense>

#include "tamis/null_model.hpp"

namespace tamis {

struct FirthResult {
  double beta = 0.0;        // the variant's coefficient at the penalised maximum
  double se = 0.0;          // sqrt([I(b)^-1]_gg) at that maximum
  double wald_chisq = 0.0;  // (beta / se)^2
  double wald_log_p = 0.0;  // ln P(chi2_1 > wald_chisq)
  double lrt_chisq = 0.0;   // penalised LR: 2 [l*(b) - l*(b0)]
  double lrt_log_p = 0.0;   // ln P(chi2_1 > lrt_chisq)
  double full_penalized_log_likelihood = 0.0;  // l*(b)
  double null_penalized_log_likelihood = 0.0;  // l*(b0): b0 maximises l* with the variant's
                                               // coefficient held at 0 (the penalty still
                                               // uses the information of [X g])
  int iterations = 0;       // Newton iterations of the full fit plus those of the null fit
  bool converged = false;   // both fits converged
};

// `genotype` holds the variant's dosages for the null model's samples; `model`
// is a binary-trait null model. Both fits use the modified score
//   U*(b) = [X g]' (y - mu + h (1/2 - mu)),  h = diag of W^1/2 X_f I^-1 X_f' W^1/2,
// in Newton steps b += I^-1 U*, halved until l* does not decrease, to
// max |step| < 1e-10 (1 + max |b|), at most 200 iterations each. A genotype in
// the covariate span (not estimable) returns converged = false with every
// statistic 0 (ln p = 0). Never returns NaN or infinity.
FirthResult firth_refit(const NullModel& model, const Eigen::VectorXd& genotype);

}  // namespace tamis
