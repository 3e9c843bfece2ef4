// The linear mixed model of related samples: y = X b + g + e with
// g ~ N(0, s2_g A) and e ~ N(0, s2_e I), so V = s2_e I + s2_g A. Written
// as V = s2 H with H = (1 - h2) I + h2 A and s2 = s2_g + s2_e.
//
// A is sparse and nearly block-diagonal: the samples fall into connected
// components (families), and each is handled on its own. Nothing n x n is
// ever dense; a component is, up to kDenseComponentLimit samples, where its
// sparse factor would fill in. Pure computation: no I/O.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "tamis/confirm.hpp"
#include "tamis/relatedness.hpp"

namespace tamis {

// The connected components of the graph whose edges are the pairs.
// Singletons are not listed; each listed component has >= 2 samples, in
// ascending order, and components are ordered by their first sample.
std::vector<std::vector<std::uint32_t>> related_components(const SparseRelatedness& relatedness);

// The REML fit of the variance components of one trait, and the ML fit of
// the same null model (the base of the confirmation's LR tests).
struct VarianceComponents {
  double h2 = 0.0;            // s2_g / (s2_g + s2_e)
  double sigma2_g = 0.0;
  double sigma2_e = 0.0;
  // The maximised log-likelihood, full constants included. REML:
  // -1/2 [(n-p) log s2 + log|H| + log|X'H^-1 X| + (n-p)(1 + log 2 pi)] with the
  // design's own columns, which is lme4's -REMLcrit/2 exactly; ML:
  // -1/2 [n log s2 + log|H| + n (1 + log 2 pi)], lme4's logLik of an ML fit.
  double log_likelihood = 0.0;
  int iterations = 0;           // evaluations of the 1-D optimiser
  bool at_boundary = false;     // h2 = 0 (or the largest admissible h2)
};

// How a component of k samples is factored (component_factor.hpp):
//   - k <= kEigenComponentLimit: eigendecomposed once, every h2 then O(k);
//   - up to kDenseComponentLimit: reduced once to tridiagonal form (4/3 k^3
//     flops, a fraction of the eigendecomposition's), every h2 then O(k) --
//     unless its sparse Cholesky factor stays sparse: when one sparse
//     factorisation costs less than kSparseWorkShare of a dense one, the
//     fit's fifty or so (and a few confirmations' two dozen each) cost less
//     than the reduction. The whitening is by the dense Cholesky factor, or
//     by the sparse one when it would hold less than kSparseWhiteningEntries
//     of the dense factor's entries (the dense loop runs about three times
//     as fast per entry);
//   - larger: a sparse Cholesky at each h2.
// The limits are crossovers measured on the machine of README's
// "Performance"; the dense path holds 2.5 k^2 doubles at its peak.
inline constexpr std::size_t kEigenComponentLimit = 128;
inline constexpr std::size_t kDenseComponentLimit = 6000;
inline constexpr double kSparseWorkShare = 0.005;
inline constexpr double kSparseWhiteningEntries = 0.35;

struct MixedModelOptions {
  std::size_t eigen_component_limit = kEigenComponentLimit;
  std::size_t dense_component_limit = kDenseComponentLimit;
  double sparse_work_share = kSparseWorkShare;
  double sparse_whitening_entries = kSparseWhiteningEntries;
  // Names analysis sample i in error messages; "#i" (from 0) when empty.
  std::function<std::string(std::uint32_t)> sample_label;
};

// Thrown as tamis::Error(ExitCode::model, ...) where H cannot be factored
// over a useful range of h2 (only below 0.5: A has an eigenvalue below -1);
// the message names the component's first samples (by sample_label, or by
// index) and suggests a higher --keep-above.
class MixedModel {
 public:
  // `y` and `design` (intercept in column 0) over the trait's analysis
  // samples, in the same order as the relatedness matrix's samples.
  // Columns of `design` that are exactly collinear with earlier ones are
  // dropped as fit_null_model drops them. Fits h2 by REML (profiling s2
  // out), and the same null model by ML. Throws tamis::Error
  // (ExitCode::model) for a constant trait or no residual degrees of freedom,
  // as fit_null_model does.
  static MixedModel fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                        const SparseRelatedness& relatedness);
  static MixedModel fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                        const SparseRelatedness& relatedness, const MixedModelOptions& options);

  const VarianceComponents& reml() const { return reml_; }
  const VarianceComponents& null_ml() const { return null_ml_; }
  const std::vector<std::vector<std::uint32_t>>& components() const;

  // The GLS estimates of the fixed effects at the REML h2 and their SEs
  // from s2_REML (X'H^-1 X)^-1, one per kept column of the design.
  const Eigen::VectorXd& coefficients() const;
  const Eigen::VectorXd& standard_errors() const;

  // Whitening at the REML h2: W with W'W = H^-1, applied per component, so
  // that ordinary least squares on (W y, W X) is the GLS fit and the
  // ordinary score test on W G is the mixed model's score test.
  Eigen::VectorXd whiten(const Eigen::VectorXd& values) const;
  Eigen::MatrixXd whiten(const Eigen::MatrixXd& values) const;
  // Whitens a sample-major block in place: sample s's values for the
  // block's `width` variants are genotypes[row_of_sample[s] * width + 0..width-1].
  // Rows not named in row_of_sample are left alone. Costs O(sum_c k_c^2
  // width); safe to call from several threads at once.
  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample) const;

  // The confirmation refit of one variant (imputed dosages over the analysis
  // samples, original scale): the variant as a fixed effect, variance
  // components re-estimated by ML under the full model; LR = 2 (l1 - l0) of
  // the two ML fits (chi2_1), Wald from the GLS estimate and its SE at the
  // full model's ML components (chi2_1). iterations counts the evaluations
  // of the full model's likelihood. A genotype in the covariate span gives
  // converged = false and every statistic 0, as confirm_variant does.
  ConfirmResult confirm(const Eigen::VectorXd& genotype) const;

  ~MixedModel();
  MixedModel(MixedModel&&) noexcept;
  MixedModel& operator=(MixedModel&&) noexcept;

 private:
  MixedModel();
  struct State;
  std::unique_ptr<State> state_;
  VarianceComponents reml_;
  VarianceComponents null_ml_;
};

}  // namespace tamis
