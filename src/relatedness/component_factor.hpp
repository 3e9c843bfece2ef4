// Factorisations of H(h2) = (1 - h2) I + h2 A over groups of samples that A
// does not connect to anyone outside the group, behind one interface:
//   - EigenComponents: every singleton and every component up to the dense
//     limit, each decomposed once as A_c = U diag(lambda) U'. In the rotated
//     coordinates U' z, H_c is diagonal (1 + h2 (lambda - 1)), so any h2 costs
//     one weighted pass over the rotated rows.
//   - DenseComponent: one larger component whose sparse Cholesky factor would
//     fill in: A_c reduced once to tridiagonal form Q' A_c Q = T (blocked
//     Householder reflections, 4/3 k^3 flops against the eigendecomposition's
//     many times that), so that any h2 costs one O(k) factorisation of the
//     tridiagonal (1 - h2) I + h2 T; the whitening is the dense Cholesky
//     factor of H_c at the fixed h2.
//   - SparseComponent: one large component with a sparse factor, H_c factored
//     as P' L L' P by a sparse Cholesky at each h2.
// The whitening W = D^-1/2 U' (or L^-1 P, or L^-1) gives W'W = H^-1.
#pragma once

#include <Eigen/Dense>
#include <Eigen/SparseCholesky>
#include <Eigen/SparseCore>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <vector>


namespace tamis::detail {

// The smallest eigenvalue H may have at an admissible h2: keeps H's
// condition bounded as h2 nears 1 on a singular A (a family intercept, whose
// A_c = J has eigenvalue 0), and below 1 / (1 - lambda_min) where an
// estimated A has a negative eigenvalue.
constexpr double kSmallestEigenvalueOfH = 1e-6;

// The admissible range [0, h2_max] of one factor, and the component that
// sets it when it is below 1 - kSmallestEigenvalueOfH.
struct AdmissibleRange {
  double h2_max = 1.0 - kSmallestEigenvalueOfH;
  std::vector<std::uint32_t> limiting_samples;   // model indices, ascending; empty when no component limits
  double smallest_eigenvalue_of_a = 1.0;         // of the limiting component (NaN where unknown: sparse)
};

class CovarianceFactor {
 public:
  virtual ~CovarianceFactor() = default;

  // Working rows: the h2-free transform of the factor's samples (rotated by
  // U' or permuted by P), in the factor's own order.
  virtual Eigen::Index row_count() const = 0;
  virtual const AdmissibleRange& admissible_range() const = 0;
  // `columns` holds one row per model sample; returns row_count() rows.
  virtual Eigen::MatrixXd to_working_rows(const Eigen::Ref<const Eigen::MatrixXd>& columns) const = 0;
  // Adds (W z)'(W z) over the working rows at h2 to `gram` and returns
  // log|H| over the factor's samples (NaN where H cannot be factored).
  virtual double add_whitened_gram(double h2, const Eigen::Ref<const Eigen::MatrixXd>& working,
                                   Eigen::MatrixXd& gram) const = 0;
  // Fixes the whitening at h2 (the REML estimate).
  virtual void set_whitening(double h2) = 0;
  // Replaces the rows of a sample-major block that belong to the factor's
  // samples by their whitened values: component sample j (in ascending
  // order) receives whitened coordinate j. `scratch` is reused.
  virtual void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                            std::vector<double>& scratch) const = 0;
};

// x <- L^-1 x for the rows of a row-major block (`width` values per row),
// with L lower triangular in compressed column-major storage (Eigen's
// sparse Cholesky factor).
void solve_sparse_lower_in_place(const Eigen::SparseMatrix<double>& lower, double* rows, std::size_t width);

// The largest admissible h2 for a block of H whose A has this smallest
// eigenvalue: the eigenvalues of H, 1 + h2 (lambda - 1), stay at or above
// kSmallestEigenvalueOfH.
double admissible_h2_for(double smallest_eigenvalue);

// One connected component of A in its own local numbering.
struct RelatedComponent {
  std::vector<std::uint32_t> samples;               // model indices, ascending
  std::vector<double> diagonal;                     // A_jj, in the order of samples
  std::vector<Eigen::Triplet<double>> pairs;        // (local row > local column, A), each pair once
};

// Samples that A connects to no one (with their A_jj) and components of at
// most the dense limit.
std::unique_ptr<CovarianceFactor> make_eigen_components(std::vector<std::uint32_t> singletons,
                                                        std::vector<double> singleton_diagonal,
                                                        std::vector<RelatedComponent> components);

// What the sparse Cholesky factor of H_c in the fill-reducing order would
// cost, from the symbolic analysis alone, as shares of a dense factor's: its
// entries (k (k + 1) / 2 dense), which set the whitening's cost per variant,
// and the work of one factorisation (the sum of its squared column counts;
// about k^3 / 3 dense). Near 1 where the factor fills in, tiny for a pedigree.
struct SparseFactorShares {
  double entries = 1.0;
  double work = 1.0;
};
SparseFactorShares sparse_factor_shares(const RelatedComponent& component);

// The rows of one component in a sample-major block replaced by their
// whitened values at a fixed h2, as CovarianceFactor::whiten_block does.
class ComponentWhitening {
 public:
  virtual ~ComponentWhitening() = default;
  virtual void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                            std::vector<double>& scratch) const = 0;
};

// W = L^-1 P by the sparse Cholesky factor of H_c(h2) in the fill-reducing
// order; throws where H_c is not positive definite at h2.
std::unique_ptr<ComponentWhitening> make_sparse_whitening(const RelatedComponent& component, double h2);

// One component, reduced once to tridiagonal form (k^2 doubles), whitened by
// its sparse Cholesky factor when `whiten_by_sparse_factor`, by the dense
// one (k^2 / 2 doubles more) otherwise.
std::unique_ptr<CovarianceFactor> make_dense_component(RelatedComponent component, bool whiten_by_sparse_factor);

// One component, factored by a sparse Cholesky at each h2.
std::unique_ptr<CovarianceFactor> make_sparse_component(RelatedComponent component);

}  // namespace tamis::detail
