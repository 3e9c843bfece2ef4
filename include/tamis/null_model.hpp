// The null model of one trait: fitted once, used by every variant's score test
// and as the starting point of every confirmation refit.
#pragma once

#include <Eigen/Dense>
#include <string>
#include <vector>

#include "tamis/types.hpp"

namespace tamis {

struct NullModel {
  TraitKind kind = TraitKind::quantitative;

  // Design matrix after dropping exactly collinear columns (n x p); the
  // intercept is column 0.
  Eigen::MatrixXd design;
  std::vector<std::string> column_names;     // names of the kept columns
  std::vector<std::string> dropped_columns;  // collinear columns, in input order

  Eigen::VectorXd y;             // the trait, n values
  Eigen::VectorXd coefficients;  // p values, in the order of column_names
  Eigen::VectorXd fitted;        // mu-hat: fitted mean (linear) or probability (logistic)
  Eigen::VectorXd residuals;     // r = y - mu-hat
  Eigen::VectorXd weights;       // W's diagonal without sigma^2: 1 (linear) or mu(1-mu) (logistic)
  Eigen::MatrixXd basis;         // Q: orthonormal basis (n x p) of W^1/2 X

  double sigma2 = 1.0;           // RSS0 / (n - p) for linear models; 1 for logistic
  double rss = 0.0;              // residual sum of squares (linear) or deviance (logistic)
  double log_likelihood = 0.0;   // maximised log-likelihood
  int iterations = 0;            // IRLS iterations (0 for linear)
  bool converged = true;

  int sample_count() const { return static_cast<int>(y.size()); }
  int column_count() const { return static_cast<int>(design.cols()); }
};

// Fits the null model. `design` comes with its intercept (a column of ones)
// as column 0; a binary trait is coded 0/1. Columns of `design` that are exactly collinear with
// earlier columns (relative tolerance 1e-9 after orthogonalisation) are
// dropped and listed in dropped_columns. Throws tamis::Error (ExitCode::model)
// naming the trait when no residual degrees of freedom remain (n <= p + 1),
// when the trait is constant, or when a logistic fit does not converge or
// separates cases from controls (the message names the likely covariate).
NullModel fit_null_model(const std::string& trait_name, TraitKind kind,
                         const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                         const std::vector<std::string>& column_names);

}  // namespace tamis
