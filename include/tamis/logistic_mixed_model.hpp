// The logistic mixed model of related samples, for binary traits:
//   logit mu = X beta + b,  b ~ N(0, tau A),
// with A the sparse relatedness matrix (a random family intercept is the
// matrix with 1 for every pair within a family).
//
// The null model is fitted by penalised quasi-likelihood (Breslow & Clayton
// 1993, JASA 88:9-25): from the working response yw = eta + (y - mu) / w and
// weights w = mu (1 - mu), the working model yw = X beta + b + e with
// Var(e) = W^-1 (dispersion fixed at 1, as Bernoulli data have) has the
// covariance Sigma = W^-1 + tau A; tau is its REML estimate, beta the GLS
// estimate and b the BLUP at that tau, and the three are iterated until the
// linear predictor settles. The REML criterion is maximised directly in one
// dimension at each iteration (the estimate that average-information REML
// converges to, with the boundary tau = 0 handled exactly).
//
// Sigma = W^-1/2 M W^-1/2 with M = I + tau W^1/2 A W^1/2, factored per
// connected component of A (families; unrelated samples are 1 x 1), so
// nothing n x n is ever dense and A is never inverted: it may be singular.
//
// The confirmation of a hit compares the Laplace approximations of the
// marginal likelihood of the null and the full model, each maximised over
// beta and tau with b at its conditional mode (the objective of a GLMM fit
// by adaptive quadrature with one node; tau at the local maximum that the
// PQL estimate leads to, see LaplaceFit::tau_held):
//   l(beta, tau) = sum_i log p(y_i | eta_i) - b'(tau A)^-1 b / 2 - log|M| / 2,
// where b'(tau A)^-1 b = b' alpha for b = tau A alpha (A^-1 not needed).
// Pure computation: no I/O.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "tamis/confirm.hpp"
#include "tamis/null_model.hpp"
#include "tamis/relatedness.hpp"

namespace tamis {

// How PQL estimates tau on each working model: REML (the default, as the
// design notes ask), or ML (what some reference implementations use; for
// checks against them).
enum class WorkingVariance { reml, ml };

struct LogisticMixedOptions {
  WorkingVariance variance = WorkingVariance::reml;
  int max_iterations = 60;    // PQL iterations
  // Converged when the largest change of the linear predictor in one
  // iteration is below this (and tau's relative change below it too).
  double tolerance = 1e-7;
  // Names analysis sample i in messages; "#i" (from 0) when empty.
  std::function<std::string(std::uint32_t)> sample_label;
};

// The PQL fit of the null model.
struct PqlSummary {
  double tau = 0.0;
  int iterations = 0;
  bool converged = false;
  double last_change = 0.0;    // largest |change of eta| in the last iteration
  bool tau_at_zero = false;    // no polygenic variance: the plain logistic model
  double reml_log_likelihood = 0.0;  // of the last working model, at tau
};

// A Laplace fit (null model, or a confirmation's full model).
struct LaplaceFit {
  double tau = 0.0;
  Eigen::VectorXd coefficients;  // beta, one per kept design column (+ the variant's last)
  double log_likelihood = 0.0;   // the Laplace approximation of the marginal log-likelihood
  int evaluations = 0;           // conditional modes computed
  bool converged = true;
  // The likelihood had no maximum in tau near the start (it climbed on
  // towards the degenerate fit of tau = infinity): tau was held at the PQL
  // estimate (null fit) or the null fit's (full fits).
  bool tau_held = false;
};

// Thrown as tamis::Error(ExitCode::model, ...) when PQL does not converge
// (the message names the iteration count and the last change) or M cannot be
// factored at any tau > 0 for the data given.
class LogisticMixedModel {
 public:
  // `y` (0/1) and `design` (intercept in column 0) over the trait's analysis
  // samples, in the order of the relatedness matrix's samples. Collinear
  // columns are dropped as fit_null_model drops them.
  static LogisticMixedModel fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                                const SparseRelatedness& relatedness,
                                const LogisticMixedOptions& options = LogisticMixedOptions());

  const PqlSummary& pql() const { return pql_; }
  const std::vector<std::vector<std::uint32_t>>& components() const;
  const Eigen::MatrixXd& design() const;            // the kept columns
  const Eigen::VectorXd& coefficients() const;      // PQL beta-hat (GLS at tau-hat)
  const Eigen::VectorXd& random_effects() const;    // PQL b-hat (BLUP at tau-hat)
  const Eigen::VectorXd& fitted() const;            // mu-hat = logistic(X beta-hat + b-hat)
  const Eigen::VectorXd& working_response() const;  // yw at the last iteration
  const Eigen::VectorXd& working_weights() const;   // w = mu-hat (1 - mu-hat)

  // The logistic model given b-hat, which the saddlepoint approximation
  // conditions on: kind binary, the kept design, fitted mu-hat, weights
  // w = mu-hat (1 - mu-hat), residuals y - mu-hat and an orthonormal basis
  // of W^1/2 X.
  NullModel conditional_model() const;

  // Whitening L with L'L = Sigma^-1 at tau-hat: the ordinary least-squares
  // fit of (L yw, L X) is the GLS fit, and the ordinary score test of L g
  // with the dispersion fixed at 1 gives U = g'(y - mu-hat) and its variance
  // g'Pg, P = Sigma^-1 - Sigma^-1 X (X' Sigma^-1 X)^-1 X' Sigma^-1.
  Eigen::VectorXd whiten(const Eigen::VectorXd& values) const;
  Eigen::MatrixXd whiten(const Eigen::MatrixXd& values) const;
  // A sample-major block in place, as MixedModel::whiten_block; safe to
  // call from several threads at once.
  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample) const;

  // The Laplace fit of the null model (the base of the confirmations' LR tests).
  const LaplaceFit& null_laplace() const;
  // The full model with the variant (imputed dosages over the analysis
  // samples) as a fixed effect: Wald from its Laplace fit (beta / SE, the SE
  // from the working model's GLS covariance at the fit), LR = 2 (l1 - l0),
  // both chi2_1. A genotype in the covariate span gives converged = false
  // and every statistic 0.
  ConfirmResult confirm(const Eigen::VectorXd& genotype) const;
  // The full model's Laplace fit itself (for tests and the log).
  LaplaceFit laplace_fit_with(const Eigen::VectorXd& genotype) const;

  ~LogisticMixedModel();
  LogisticMixedModel(LogisticMixedModel&&) noexcept;
  LogisticMixedModel& operator=(LogisticMixedModel&&) noexcept;

 private:
  LogisticMixedModel();
  struct Confirmed {
    ConfirmResult result;
    LaplaceFit fit;
  };
  Confirmed confirm_fit(const Eigen::VectorXd& genotype) const;
  struct State;
  std::unique_ptr<State> state_;
  PqlSummary pql_;
};

}  // namespace tamis
