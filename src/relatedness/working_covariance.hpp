// The working covariance of the logistic mixed model, Sigma = W^-1 + tau A,
// held as Sigma = D^-1 M D^-1 with D = W^1/2 and M = I + tau D A D, and M
// factored per connected component of A:
//   - an unrelated sample: M_jj = 1 + tau w_j A_jj;
//   - a component up to kDenseWorkingLimit samples, or one whose sparse
//     factor would fill in (up to kDenseComponentLimit): a dense Cholesky factor;
//   - any other: a sparse Cholesky factor in a fill-reducing order (its
//     pattern, that of A_c, analysed once; only the values change with W and
//     tau), so a pedigree of thousands costs what its factor's nonzeros cost.
// Unlike the linear model's H(h2), M changes with W at every iteration of
// the fit, so nothing is decomposed once for all values of tau.
#pragma once

#include <Eigen/Dense>
#include <Eigen/SparseCholesky>
#include <Eigen/SparseCore>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>

#include "tamis/relatedness.hpp"

namespace tamis::detail {

inline constexpr std::size_t kDenseWorkingLimit = 200;

// A's diagonal blocks, shared (read-only) by every WorkingCovariance of a fit
// and of its confirmations.
struct RelatednessBlocks {
  struct Block {
    std::vector<std::uint32_t> samples;  // model indices, ascending
    Eigen::MatrixXd dense;               // A_c, up to kDenseWorkingLimit samples
    Eigen::SparseMatrix<double> lower;   // else its lower triangle, every diagonal entry stored
  };
  std::size_t sample_count = 0;
  std::vector<std::uint32_t> singletons;
  std::vector<double> singleton_diagonal;  // A_jj of each
  std::vector<Block> blocks;

  static std::shared_ptr<const RelatednessBlocks> from(const SparseRelatedness& relatedness,
                                                      const std::vector<std::vector<std::uint32_t>>& components);
};

class WorkingCovariance {
 public:
  explicit WorkingCovariance(std::shared_ptr<const RelatednessBlocks> blocks);
  ~WorkingCovariance();
  WorkingCovariance(WorkingCovariance&&) noexcept;
  WorkingCovariance& operator=(WorkingCovariance&&) noexcept;

  // Factors M for D = diag(root_weights) at tau; false (and nothing usable)
  // where M is not positive definite.
  bool factor(const Eigen::VectorXd& root_weights, double tau);

  double log_determinant() const;  // log|M|
  // M^-1 z for columns z over the samples (model order).
  Eigen::MatrixXd solve(const Eigen::MatrixXd& columns) const;
  // W z with W'W = M^-1 (W = L^-1 P per component), as rows in model order:
  // a component's j-th whitened coordinate goes to its j-th sample.
  Eigen::MatrixXd whiten(const Eigen::MatrixXd& columns) const;
  // The rows of a sample-major block, in place, likewise (each variant's
  // values independent of the block's other columns). Thread-safe.
  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample) const;
  // diag(M^-1).
  Eigen::VectorXd inverse_diagonal() const;

 private:
  struct Factor;
  std::shared_ptr<const RelatednessBlocks> blocks_;
  Eigen::VectorXd singleton_pivots_;  // sqrt(M_jj)
  std::vector<std::unique_ptr<Factor>> factors_;  // one per block
};

}  // namespace tamis::detail
