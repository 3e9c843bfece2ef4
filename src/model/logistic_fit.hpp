// Logistic regression by iteratively reweighted least squares, shared by the
// null model and the confirmation refit (internal to src/model).
#pragma once

#include <Eigen/Dense>

namespace tamis::detail {

struct LogisticFit {
  Eigen::VectorXd coefficients;
  Eigen::VectorXd eta;       // linear predictor X b
  Eigen::VectorXd mu;        // fitted probabilities
  Eigen::VectorXd weights;   // mu (1 - mu)
  double deviance = 0.0;     // -2 log-likelihood (0/1 outcomes: saturated log-lik is 0)
  int iterations = 0;
  bool converged = false;
  bool separated = false;    // fitted probabilities numerically 0 or 1 (|eta| > 30)
  double last_step = 0.0;    // max |delta b| of the last accepted step
};

// Binomial deviance of 0/1 outcomes `y` at linear predictor `eta`, computed
// with a stable softplus.
double logistic_deviance(const Eigen::VectorXd& y, const Eigen::VectorXd& eta);

// Fits y ~ X starting from `start`, with step halving whenever the deviance
// increases. Converges when max |delta b| < 1e-10 (1 + max |b|), or when the
// relative deviance change is below 1e-12 and the step is already small.
// Never returns non-finite values: a diverging fit stops at `max_iterations`
// (or at the first non-finite step) with converged = false and the last finite
// coefficients.
LogisticFit fit_logistic(const Eigen::MatrixXd& design, const Eigen::VectorXd& y,
                         const Eigen::VectorXd& start, int max_iterations = 100);

}  // namespace tamis::detail
