#include "relatedness/component_factor.hpp"

#include <Eigen/Eigenvalues>
#include <algorithm>
#include <cmath>
#include <limits>

namespace tamis::detail {
namespace {

// The largest admissible h2 for a block whose A has smallest eigenvalue
// lambda: the eigenvalues of H, 1 + h2 (lambda - 1), stay at or above
// kSmallestEigenvalueOfH.
double admissible_h2_for(double smallest_eigenvalue) {
  const double cap = 1.0 - kSmallestEigenvalueOfH;
  if (smallest_eigenvalue >= kSmallestEigenvalueOfH) return cap;
  return std::min(cap, (1.0 - kSmallestEigenvalueOfH) / (1.0 - smallest_eigenvalue));
}

// Copies the rows of `samples` out of a sample-major block into `buffer`
// (samples.size() x width, row-major), and back.
void gather_rows(const double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                 const std::vector<std::uint32_t>& samples, double* buffer) {
  for (std::size_t local = 0; local < samples.size(); ++local) {
    const double* source = genotypes + row_of_sample[samples[local]] * width;
    std::copy(source, source + width, buffer + local * width);
  }
}
void scatter_rows(const double* buffer, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                  const std::vector<std::uint32_t>& samples, double* genotypes) {
  for (std::size_t local = 0; local < samples.size(); ++local) {
    std::copy(buffer + local * width, buffer + (local + 1) * width,
              genotypes + row_of_sample[samples[local]] * width);
  }
}

using RowMajorMatrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

class EigenComponents final : public CovarianceFactor {
 public:
  EigenComponents(std::vector<std::uint32_t> singletons, std::vector<double> singleton_diagonal,
                  std::vector<RelatedComponent> components)
      : singletons_(std::move(singletons)) {
    Eigen::Index rows = static_cast<Eigen::Index>(singletons_.size());
    for (const RelatedComponent& component : components) rows += static_cast<Eigen::Index>(component.samples.size());
    eigenvalues_.resize(rows);
    for (std::size_t single_idx = 0; single_idx < singletons_.size(); ++single_idx) {
      eigenvalues_[static_cast<Eigen::Index>(single_idx)] = singleton_diagonal[single_idx];
      limit_range(singleton_diagonal[single_idx], {singletons_[single_idx]});
    }
    Eigen::Index offset = static_cast<Eigen::Index>(singletons_.size());
    for (RelatedComponent& component : components) {
      const Eigen::Index size = static_cast<Eigen::Index>(component.samples.size());
      Eigen::MatrixXd block = Eigen::MatrixXd::Zero(size, size);
      block.diagonal() = Eigen::Map<const Eigen::VectorXd>(component.diagonal.data(), size);
      for (const Eigen::Triplet<double>& pair : component.pairs) {
        block(pair.row(), pair.col()) = pair.value();
        block(pair.col(), pair.row()) = pair.value();
      }
      Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> solver(block);
      eigenvalues_.segment(offset, size) = solver.eigenvalues();
      offset += size;
      limit_range(solver.eigenvalues()[0], component.samples);
      largest_ = std::max(largest_, component.samples.size());
      components_.push_back({std::move(component.samples), solver.eigenvectors(), Eigen::MatrixXd()});
    }
    singleton_scale_ = Eigen::VectorXd::Ones(static_cast<Eigen::Index>(singletons_.size()));
  }

  Eigen::Index row_count() const override { return eigenvalues_.size(); }
  const AdmissibleRange& admissible_range() const override { return range_; }

  Eigen::MatrixXd to_working_rows(const Eigen::Ref<const Eigen::MatrixXd>& columns) const override {
    Eigen::MatrixXd working(row_count(), columns.cols());
    Eigen::Index offset = 0;
    for (std::uint32_t sample : singletons_) working.row(offset++) = columns.row(sample);
    for (const Decomposed& component : components_) {
      const Eigen::Index size = static_cast<Eigen::Index>(component.samples.size());
      working.middleRows(offset, size).noalias() =
          component.eigenvectors.transpose() * columns(component.samples, Eigen::all);
      offset += size;
    }
    return working;
  }

  double add_whitened_gram(double h2, const Eigen::Ref<const Eigen::MatrixXd>& working,
                           Eigen::MatrixXd& gram) const override {
    const Eigen::ArrayXd h_eigenvalues = 1.0 + h2 * (eigenvalues_.array() - 1.0);
    if (!(h_eigenvalues > 0.0).all()) return std::numeric_limits<double>::quiet_NaN();
    gram.noalias() += working.transpose() * h_eigenvalues.inverse().matrix().asDiagonal() * working;
    return h_eigenvalues.log().sum();
  }

  void set_whitening(double h2) override {
    const Eigen::Index single_count = static_cast<Eigen::Index>(singletons_.size());
    const Eigen::ArrayXd scale = (1.0 + h2 * (eigenvalues_.array() - 1.0)).rsqrt();
    singleton_scale_ = scale.head(single_count);
    Eigen::Index offset = single_count;
    for (Decomposed& component : components_) {
      const Eigen::Index size = static_cast<Eigen::Index>(component.samples.size());
      component.whitening = scale.segment(offset, size).matrix().asDiagonal() * component.eigenvectors.transpose();
      offset += size;
    }
  }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    for (std::size_t single_idx = 0; single_idx < singletons_.size(); ++single_idx) {
      double* row = genotypes + row_of_sample[singletons_[single_idx]] * width;
      const double scale = singleton_scale_[static_cast<Eigen::Index>(single_idx)];
      for (std::size_t col = 0; col < width; ++col) row[col] *= scale;
    }
    scratch.resize(2 * largest_ * width);
    for (const Decomposed& component : components_) {
      const Eigen::Index size = static_cast<Eigen::Index>(component.samples.size());
      const Eigen::Index columns = static_cast<Eigen::Index>(width);
      double* gathered = scratch.data();
      double* whitened = scratch.data() + largest_ * width;
      gather_rows(genotypes, width, row_of_sample, component.samples, gathered);
      Eigen::Map<RowMajorMatrix>(whitened, size, columns).noalias() =
          component.whitening * Eigen::Map<const RowMajorMatrix>(gathered, size, columns);
      scatter_rows(whitened, width, row_of_sample, component.samples, genotypes);
    }
  }

 private:
  struct Decomposed {
    std::vector<std::uint32_t> samples;
    Eigen::MatrixXd eigenvectors;  // U, columns in the order of eigenvalues_
    Eigen::MatrixXd whitening;     // D^-1/2 U' at the fixed h2
  };

  void limit_range(double smallest_eigenvalue, std::vector<std::uint32_t> samples) {
    const double h2_max = admissible_h2_for(smallest_eigenvalue);
    if (h2_max < range_.h2_max) range_ = {h2_max, std::move(samples), smallest_eigenvalue};
  }

  std::vector<std::uint32_t> singletons_;
  Eigen::VectorXd singleton_scale_;  // D^-1/2 of the singletons at the fixed h2
  std::vector<Decomposed> components_;
  Eigen::VectorXd eigenvalues_;  // of A, in working-row order: singletons, then each component's
  std::size_t largest_ = 0;
  AdmissibleRange range_;
};

class SparseComponent final : public CovarianceFactor {
  using Factor = Eigen::SimplicialLLT<Eigen::SparseMatrix<double>, Eigen::Lower, Eigen::AMDOrdering<int>>;

 public:
  explicit SparseComponent(RelatedComponent component) : samples_(std::move(component.samples)) {
    const int size = static_cast<int>(samples_.size());
    std::vector<Eigen::Triplet<double>> entries = std::move(component.pairs);
    for (int local = 0; local < size; ++local) {
      entries.emplace_back(local, local, component.diagonal[static_cast<std::size_t>(local)]);
    }
    lower_a_.resize(size, size);
    lower_a_.setFromTriplets(entries.begin(), entries.end());
    identity_.resize(size, size);
    identity_.setIdentity();
    find_admissible_range();
  }

  Eigen::Index row_count() const override { return static_cast<Eigen::Index>(samples_.size()); }
  const AdmissibleRange& admissible_range() const override { return range_; }

  // The Gram matrix does not depend on the order of the rows, so the working
  // rows are the samples' own; each factor permutes them as it needs.
  Eigen::MatrixXd to_working_rows(const Eigen::Ref<const Eigen::MatrixXd>& columns) const override {
    return columns(samples_, Eigen::all);
  }

  double add_whitened_gram(double h2, const Eigen::Ref<const Eigen::MatrixXd>& working,
                           Eigen::MatrixXd& gram) const override {
    const std::unique_ptr<Factor> factor = factor_at(h2);
    if (!factor) return std::numeric_limits<double>::quiet_NaN();
    Eigen::MatrixXd whitened = factor->permutationP() * working;
    factor->matrixL().solveInPlace(whitened);
    gram.noalias() += whitened.transpose() * whitened;
    return 2.0 * factor->matrixL().nestedExpression().diagonal().array().log().sum();
  }

  void set_whitening(double h2) override { whitening_ = factor_at(h2); }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    const Eigen::Index size = row_count();
    scratch.resize(samples_.size() * width);
    gather_rows(genotypes, width, row_of_sample, samples_, scratch.data());
    Eigen::MatrixXd whitened =
        whitening_->permutationP() * Eigen::Map<const RowMajorMatrix>(scratch.data(), size, static_cast<Eigen::Index>(width));
    whitening_->matrixL().solveInPlace(whitened);
    Eigen::Map<RowMajorMatrix>(scratch.data(), size, static_cast<Eigen::Index>(width)) = whitened;
    scatter_rows(scratch.data(), width, row_of_sample, samples_, genotypes);
  }

 private:
  // H(h2) = h2 A + (1 - h2) I, factored; null where it is not positive definite.
  std::unique_ptr<Factor> factor_at(double h2) const {
    const Eigen::SparseMatrix<double> h = h2 * lower_a_ + (1.0 - h2) * identity_;
    auto factor = std::make_unique<Factor>(h);
    if (factor->info() != Eigen::Success) return nullptr;
    const Eigen::VectorXd pivots = factor->matrixL().nestedExpression().diagonal();
    if (!(pivots.array() > 0.0).all() || !pivots.allFinite()) return nullptr;
    return factor;
  }

  // H is positive definite on [0, h*) (it is linear in h2 and H(0) = I), so
  // h* is found by bisection when H does not factor at the cap; then
  // lambda_min(A) = 1 - 1 / h*, and the range ends where the dense path's
  // would (admissible_h2_for).
  void find_admissible_range() {
    const double cap = 1.0 - kSmallestEigenvalueOfH;
    if (factor_at(cap)) return;
    double factorable = 0.0, failing = cap;
    while (failing - factorable > 1e-10 * failing) {
      const double middle = 0.5 * (factorable + failing);
      (factor_at(middle) ? factorable : failing) = middle;
    }
    const double smallest_eigenvalue = 1.0 - 1.0 / failing;
    range_ = {admissible_h2_for(smallest_eigenvalue), samples_, smallest_eigenvalue};
  }

  std::vector<std::uint32_t> samples_;
  Eigen::SparseMatrix<double> lower_a_;  // A's lower triangle, diagonal included, in local numbering
  Eigen::SparseMatrix<double> identity_;
  std::unique_ptr<Factor> whitening_;    // the factor at the fixed h2
  AdmissibleRange range_;
};

}  // namespace

std::unique_ptr<CovarianceFactor> make_eigen_components(std::vector<std::uint32_t> singletons,
                                                        std::vector<double> singleton_diagonal,
                                                        std::vector<RelatedComponent> components) {
  return std::make_unique<EigenComponents>(std::move(singletons), std::move(singleton_diagonal),
                                           std::move(components));
}

std::unique_ptr<CovarianceFactor> make_sparse_component(RelatedComponent component) {
  return std::make_unique<SparseComponent>(std::move(component));
}

}  // namespace tamis::detail
