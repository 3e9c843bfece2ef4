// The linear mixed model of related samples: y = X b + g + e with
// g ~ N(0, s2_g A) and e ~ N(0, s2_e I), so V = s2_e I + s2_g A. Written
// as V = s2 H with H = (1 - h2) I + h2 A and s2 = s2_g + s2_e.
//
// A is sparse and nearly block-diagonal: the samples fall into connected
// components (families), and each is handled on its own. Nothing n x n is
// ever dense. Pure computation: no I/O.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <cstdint>
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
  double log_likelihood = 0.0;  // the maximised REML (or ML) log-likelihood, full constants included
  int iterations = 0;           // evaluations of the 1-D optimiser
  bool at_boundary = false;     // h2 = 0 (or the largest admissible h2)
};

// Thrown as tamis::Error(ExitCode::model, ...) where H cannot be factored at
// any admissible h2; the message names the component's first samples by
// index, which the caller maps to sample IDs.
class MixedModel {
 public:
  // `y` and `design` (intercept in column 0) over the trait's analysis
  // samples, in the same order as the relatedness matrix's samples.
  // Fits h2 by REML (profiling s2 out), and the same null model by ML.
  static MixedModel fit(const Eigen::VectorXd& y, const Eigen::MatrixXd& design,
                        const SparseRelatedness& relatedness);

  const VarianceComponents& reml() const { return reml_; }
  const VarianceComponents& null_ml() const { return null_ml_; }
  const std::vector<std::vector<std::uint32_t>>& components() const;

  // Whitening at the REML h2: W with W'W = H^-1, applied per component, so
  // that ordinary least squares on (W y, W X) is the GLS fit and the
  // ordinary score test on W G is the mixed model's score test.
  Eigen::VectorXd whiten(const Eigen::VectorXd& values) const;
  Eigen::MatrixXd whiten(const Eigen::MatrixXd& values) const;
  // Whitens a sample-major block in place: sample s's values for the
  // block's `width` variants are genotypes[row_of_sample[s] * width + 0..width-1].
  // Rows not named in row_of_sample are left alone.
  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample) const;

  // The confirmation refit of one variant (imputed dosages over the analysis
  // samples, original scale): the variant as a fixed effect, variance
  // components re-estimated by ML under the full model; LR = 2 (l1 - l0) of
  // the two ML fits (chi2_1), Wald from the GLS estimate and its SE at the
  // full model's ML components (chi2_1).
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
