// Gene-environment interaction refits: the model y = X b + g c + (g . E) d,
// where E (one exposure: a numeric column, or a categorical covariate's k
// indicator columns) is among the null model's covariates. Wald tests of the
// interaction d (k df) and of the variant's effects (c, d) jointly (k + 1 df;
// Kraft et al. 2007, Hum Hered 63:111-119), with the model-based variance
// and a heteroscedasticity-consistent (sandwich) variance (White 1980,
// Econometrica 48:817-838; HC3: MacKinnon & White 1985, J Econometrics
// 29:305-325), and likelihood-ratio tests of both.
#pragma once

#include <Eigen/Dense>

#include "tamis/null_model.hpp"

namespace tamis {

// The sandwich's per-sample weighting of the squared residuals.
enum class RobustErrors { off, hc0, hc3 };

const char* robust_errors_name(RobustErrors robust);

// A Wald or likelihood-ratio test of `df` coefficients.
struct InteractionTest {
  double statistic = 0.0;  // Wald: b' V^-1 b; LR: n log(RSS0/RSS1) (linear), deviance drop (logistic)
  int df = 0;
  double log_p = 0.0;  // ln p (see fit_interaction for the reference distributions)
};

struct InteractionFit {
  // The variant's main effect c and the interaction d (one per exposure
  // column), with SEs from the robust variance (the model-based one with
  // RobustErrors::off) and from the model-based variance.
  double main_beta = 0.0, main_se = 0.0, main_model_se = 0.0;
  Eigen::VectorXd interaction_beta, interaction_se, interaction_model_se;
  InteractionTest interaction_robust, interaction_model, interaction_lr;
  InteractionTest joint_robust, joint_model, joint_lr;
  int iterations = 0;
  // False when the fit could not be trusted (a logistic fit that separates
  // or does not converge): the statistics are the last finite values. A
  // variant whose columns are not estimable (g or g . E in the span of the
  // others) is not converged, with every statistic 0 and ln p 0.
  bool converged = true;
  bool estimable = true;
};

// `exposure` holds E's columns over the null model's samples (n x k, k >= 1),
// each also a column of the null design, and `genotype` the variant's
// imputed dosages. Reference distributions: linear models use Student's t
// (1 df) or F (k df: W / k) with n - p - 1 - k residual degrees of freedom
// for the Wald tests, as textbook regression output does; logistic models
// use chi-square(k). Likelihood-ratio tests use chi-square(k) for both.
// `robust` = off leaves the robust tests equal to the model-based ones.
InteractionFit fit_interaction(const NullModel& model, const Eigen::MatrixXd& exposure,
                               const Eigen::VectorXd& genotype, RobustErrors robust);

}  // namespace tamis
