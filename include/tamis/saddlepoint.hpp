// Saddlepoint approximation of the null distribution of a binary trait's
// score statistic (Dey, Schmidt, Abecasis & Lee 2017, AJHG 101:37-49).
//
// Under the null, U = sum_i gt_i (Y_i - mu_i) with Y_i ~ Bernoulli(mu_i)
// independent, where gt = g - X (X'WX)^-1 X'W g is the covariate-adjusted
// genotype. At the logistic maximum-likelihood fit X'r = 0, so G'r (the
// score kernel's U) equals gt'r. The cumulant generating function of U is
//   K(t) = sum_i [ln(1 - mu_i + mu_i e^(t gt_i)) - t gt_i mu_i],
// its saddlepoint zeta solves K'(zeta) = u, and the tail comes from
// Barndorff-Nielsen's form of the Lugannani-Rice formula,
//   P(U >= u) ~ 1 - Phi(w + ln(v / w) / w),
//   w = sign(zeta) sqrt(2 (zeta u - K(zeta))),  v = zeta sqrt(K''(zeta)),
// evaluated in log space so that p-values far below 1e-300 stay exact.
#pragma once

#include <Eigen/Dense>

#include "tamis/null_model.hpp"

namespace tamis {

namespace detail {
struct AdjustedTerms;
}

struct SaddlepointResult {
  double log_p = 0.0;             // ln of the two-sided p: P(U >= |u|) + P(U <= -|u|)
  bool used_saddlepoint = false;  // true when log_p comes from the saddlepoint tails
  bool fell_back = false;         // the saddlepoint was called for but unusable (no
                                  // saddlepoint found, or a non-finite tail): log_p is
                                  // the normal approximation instead
};

// What the saddlepoint needs from one logistic null model, prepared once and
// shared (read-only, so by any number of threads) by every variant.
class SaddlepointContext {
 public:
  // `model` must be a binary-trait null model (the context keeps its own copies).
  explicit SaddlepointContext(const NullModel& model);

  // gt = g - X (X'WX)^-1 X'W g for one variant's dosages (n values, the
  // null model's sample order), written into `adjusted`. O(n p).
  void adjust_genotype(const Eigen::VectorXd& genotype, Eigen::VectorXd& adjusted) const;

  // Var(gt'(Y - mu)) = sum_i gt_i^2 mu_i (1 - mu_i) for Y_i ~ Bernoulli(mu_i). O(n p).
  double bernoulli_variance(const Eigen::VectorXd& genotype) const;

  const Eigen::VectorXd& mu() const { return mu_; }
  const Eigen::VectorXd& one_minus_mu() const { return one_minus_mu_; }
  int sample_count() const { return static_cast<int>(mu_.size()); }

 private:
  friend SaddlepointResult saddlepoint_score_log_p(const SaddlepointContext&, const Eigen::VectorXd&,
                                                   double, double, double);
  // The terms of U's CGF for one variant: exact for the carriers (g != 0),
  // and one normal part for the non-carriers. O(carriers x p).
  detail::AdjustedTerms collect_carrier_terms(const Eigen::VectorXd& genotype, double variance_v) const;

  Eigen::VectorXd mu_;
  Eigen::VectorXd one_minus_mu_;  // from the weights, w / mu, so it keeps precision near mu = 1
  // Row-major: each variant's carriers are visited sample by sample.
  using RowMajorMatrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
  RowMajorMatrix weighted_basis_;  // W^1/2 Q
  RowMajorMatrix unweighted_basis_;  // W^-1/2 Q (= X R^-1 for W^1/2 X = QR)
};

// Two-sided p-value of the observed score `score_u` with null variance
// `variance_v` (both as the score kernel computes them). The carriers
// (samples with a non-zero dosage) enter the CGF exactly. With at least 500
// non-carriers, whose adjusted genotypes are small, those enter through the
// normal approximation of their joint CGF, with the variance V leaves after
// the carriers (the fast form of Dey et al. 2017), so one call costs
// O(carriers x p) plus Newton iterations over the carriers; with fewer, every
// sample enters exactly (O(n p)). Below the cut-off
// |u| / sqrt(V) < normal_cutoff the normal approximation is exact enough and is
// returned (used_saddlepoint = false); beyond it the saddlepoint tails are
// summed. V <= 0 (nothing to test, e.g. an all-zero genotype) gives ln p = 0.
// log_p is always finite and <= 0, never NaN.
SaddlepointResult saddlepoint_score_log_p(const SaddlepointContext& context,
                                          const Eigen::VectorXd& genotype, double score_u,
                                          double variance_v, double normal_cutoff = 2.0);

// The same, building the context for this one call (O(n p) more work): for
// occasional use; a scan keeps one SaddlepointContext per trait.
SaddlepointResult saddlepoint_score_log_p(const NullModel& model, const Eigen::VectorXd& genotype,
                                          double score_u, double variance_v,
                                          double normal_cutoff = 2.0);

// ln P(U >= x) by the saddlepoint for U = sum adjusted_i (Y_i - mu_i) + N,
// N ~ normal(0, gaussian_variance) independent (x may have either sign; for
// x <= 0 this is the lower tail P(U <= x) instead), every non-zero adjusted
// value entering the CGF exactly. Returns false when no usable saddlepoint
// tail exists; -infinity when x lies beyond the values U can take. Exposed
// for testing the tails one at a time.
bool saddlepoint_log_tail(const Eigen::VectorXd& adjusted, const Eigen::VectorXd& mu,
                          const Eigen::VectorXd& one_minus_mu, double x, double* log_tail,
                          double gaussian_variance = 0.0);

}  // namespace tamis
