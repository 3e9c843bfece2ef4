#include "relatedness/component_factor.hpp"

#include <Eigen/Eigenvalues>
#include <algorithm>
#include <cmath>
#include <limits>

#include "common/vector_clones.hpp"
#include "tamis/errors.hpp"

namespace tamis::detail {

// All columns of the block go through each nonzero of L together, while
// every column still sees the same operations in the same order as it would
// alone: a variant's values do not depend on the others in the block.
TAMIS_VECTOR_CLONES
void solve_sparse_lower_in_place(const Eigen::SparseMatrix<double>& lower, double* rows, std::size_t width) {
  const int* starts = lower.outerIndexPtr();
  const int* row_of_entry = lower.innerIndexPtr();
  const int* stored = lower.innerNonZeroPtr();  // null when compressed
  const double* values = lower.valuePtr();
  for (Eigen::Index col = 0; col < lower.outerSize(); ++col) {
    const int begin = starts[col];
    const int end = stored ? begin + stored[col] : starts[col + 1];
    double* pivot_row = rows + static_cast<std::size_t>(col) * width;
    for (int entry = begin; entry < end; ++entry) {
      if (row_of_entry[entry] != col) continue;
      const double pivot = values[entry];
      for (std::size_t column = 0; column < width; ++column) pivot_row[column] /= pivot;
    }
    for (int entry = begin; entry < end; ++entry) {
      if (row_of_entry[entry] <= col) continue;
      double* target = rows + static_cast<std::size_t>(row_of_entry[entry]) * width;
      const double weight = values[entry];
      for (std::size_t column = 0; column < width; ++column) target[column] -= weight * pivot_row[column];
    }
  }
}

double admissible_h2_for(double smallest_eigenvalue) {
  const double cap = 1.0 - kSmallestEigenvalueOfH;
  if (smallest_eigenvalue >= kSmallestEigenvalueOfH) return cap;
  return std::min(cap, (1.0 - kSmallestEigenvalueOfH) / (1.0 - smallest_eigenvalue));
}

namespace {

// Copies the rows of samples[0 .. count-1] out of a sample-major block into
// `buffer` (count x width, row-major), and back.
void gather_rows(const double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                 const std::uint32_t* samples, std::size_t count, double* buffer) {
  for (std::size_t local = 0; local < count; ++local) {
    const double* source = genotypes + row_of_sample[samples[local]] * width;
    std::copy(source, source + width, buffer + local * width);
  }
}

void scatter_rows(const double* buffer, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                  const std::uint32_t* samples, std::size_t count, double* genotypes) {
  for (std::size_t local = 0; local < count; ++local) {
    std::copy(buffer + local * width, buffer + (local + 1) * width,
              genotypes + row_of_sample[samples[local]] * width);
  }
}

// Components above this size are whitened by a sparse Cholesky factor of H_c
// at the REML h2 rather than by the dense D^-1/2 U': per variant that costs
// the factor's nonzeros instead of k^2, which for a pedigree's sparse A is far
// less (the likelihood still uses the eigendecomposition, whose evaluations
// cost O(k) at any h2).
constexpr std::size_t kDenseWhiteningLimit = 12;

using RowMajorMatrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
using SparseFactor = Eigen::SimplicialLLT<Eigen::SparseMatrix<double>, Eigen::Lower, Eigen::NaturalOrdering<int>>;

using Permutation = Eigen::PermutationMatrix<Eigen::Dynamic, Eigen::Dynamic, int>;

// The lower triangle (diagonal included) of P A_c P', compressed, with P a
// fill-reducing ordering (AMD) of A_c's graph.
Eigen::SparseMatrix<double> ordered_lower_triangle(const RelatedComponent& component, Permutation& permutation) {
  const int size = static_cast<int>(component.samples.size());
  std::vector<Eigen::Triplet<double>> entries = component.pairs;
  for (int local = 0; local < size; ++local) {
    entries.emplace_back(local, local, component.diagonal[static_cast<std::size_t>(local)]);
  }
  Eigen::SparseMatrix<double> lower(size, size);
  lower.setFromTriplets(entries.begin(), entries.end());
  const Eigen::SparseMatrix<double> full = lower.selfadjointView<Eigen::Lower>();
  Permutation inverse;
  Eigen::AMDOrdering<int>()(full, inverse);
  permutation = inverse.inverse();
  Eigen::SparseMatrix<double> ordered(size, size);
  ordered.selfadjointView<Eigen::Lower>() = lower.selfadjointView<Eigen::Lower>().twistedBy(permutation);
  ordered.makeCompressed();
  return ordered;
}

// The column counts of the Cholesky factor of a matrix with this lower
// triangle (diagonal included), from its elimination tree: row i of L holds
// the nodes on the tree paths from each j < i with A_ij != 0 up to i (Liu
// 1990, SIAM J. Matrix Anal. Appl. 11:134-172). O(nnz(L)) time.
std::vector<std::int64_t> cholesky_column_counts(const Eigen::SparseMatrix<double>& lower) {
  const Eigen::SparseMatrix<double> upper = lower.transpose();  // column i: the rows j <= i of row i of A
  const Eigen::Index size = upper.cols();
  std::vector<Eigen::Index> parent(static_cast<std::size_t>(size), -1), ancestor(static_cast<std::size_t>(size), -1);
  for (Eigen::Index row = 0; row < size; ++row) {
    for (Eigen::SparseMatrix<double>::InnerIterator entry(upper, row); entry; ++entry) {
      // Walk from the entry's column up to the root of its current subtree
      // (compressing the path to `row`); that root's parent is `row`.
      for (Eigen::Index node = entry.row(), next; node != -1 && node < row; node = next) {
        next = ancestor[static_cast<std::size_t>(node)];
        ancestor[static_cast<std::size_t>(node)] = row;
        if (next == -1) parent[static_cast<std::size_t>(node)] = row;
      }
    }
  }
  std::vector<std::int64_t> counts(static_cast<std::size_t>(size), 0);
  std::vector<Eigen::Index> visited_by(static_cast<std::size_t>(size), -1);
  for (Eigen::Index row = 0; row < size; ++row) {
    visited_by[static_cast<std::size_t>(row)] = row;
    ++counts[static_cast<std::size_t>(row)];
    for (Eigen::SparseMatrix<double>::InnerIterator entry(upper, row); entry; ++entry) {
      for (Eigen::Index node = entry.row(); visited_by[static_cast<std::size_t>(node)] != row;
           node = parent[static_cast<std::size_t>(node)]) {
        visited_by[static_cast<std::size_t>(node)] = row;
        ++counts[static_cast<std::size_t>(node)];
      }
    }
  }
  return counts;
}

// H_c(h2) = h2 A_c + (1 - h2) I of one component as a sparse matrix, its
// rows and columns permuted once by a fill-reducing ordering P (AMD), and its
// Cholesky factor P H P' = L L' at any h2: W = L^-1 P whitens.
class SparseH {
 public:
  explicit SparseH(const RelatedComponent& component)
      : permuted_lower_a_(ordered_lower_triangle(component, permutation_)) {
    const int size = static_cast<int>(component.samples.size());
    const int* starts = permuted_lower_a_.outerIndexPtr();
    const int* rows = permuted_lower_a_.innerIndexPtr();
    for (int col = 0; col < size; ++col) {
      for (int position = starts[col]; position < starts[col + 1]; ++position) {
        if (rows[position] == col) diagonal_positions_.push_back(position);
      }
    }
  }

  // Null where H is not positive definite at h2.
  std::unique_ptr<SparseFactor> factor_at(double h2) const {
    Eigen::SparseMatrix<double> h = permuted_lower_a_;
    double* values = h.valuePtr();
    for (Eigen::Index entry = 0; entry < h.nonZeros(); ++entry) values[entry] *= h2;
    for (Eigen::Index position : diagonal_positions_) values[position] += 1.0 - h2;
    auto factor = std::make_unique<SparseFactor>(h);
    if (factor->info() != Eigen::Success) return nullptr;
    const Eigen::VectorXd pivots = factor->matrixL().nestedExpression().diagonal();
    if (!(pivots.array() > 0.0).all() || !pivots.allFinite()) return nullptr;
    return factor;
  }

  // The factor at an h2 where H must be positive definite.
  std::unique_ptr<SparseFactor> whitening_factor_at(double h2) const {
    std::unique_ptr<SparseFactor> factor = factor_at(h2);
    if (!factor) throw Error(ExitCode::internal, "mixed model", "H is not positive definite at the fitted h2");
    return factor;
  }

  // L^-1 P z for columns z over the component's samples in their own order,
  // as rows (row-major, one row per whitened coordinate).
  RowMajorMatrix whiten(const SparseFactor& factor, const Eigen::Ref<const Eigen::MatrixXd>& columns) const {
    RowMajorMatrix rows(columns.rows(), columns.cols());
    const int* position = permutation_.indices().data();
    for (Eigen::Index local = 0; local < columns.rows(); ++local) rows.row(position[local]) = columns.row(local);
    solve_sparse_lower_in_place(factor.matrixL().nestedExpression(), rows.data(), static_cast<std::size_t>(columns.cols()));
    return rows;
  }

  // The same for the component's rows of a sample-major block, in place.
  void whiten_block(const SparseFactor& factor, const std::vector<std::uint32_t>& samples, double* genotypes,
                    std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const {
    scratch.resize(samples.size() * width);
    const int* position = permutation_.indices().data();
    for (std::size_t local = 0; local < samples.size(); ++local) {
      const double* source = genotypes + row_of_sample[samples[local]] * width;
      std::copy(source, source + width, scratch.data() + static_cast<std::size_t>(position[local]) * width);
    }
    solve_sparse_lower_in_place(factor.matrixL().nestedExpression(), scratch.data(), width);
    scatter_rows(scratch.data(), width, row_of_sample, samples.data(), samples.size(), genotypes);
  }

 private:
  Permutation permutation_;
  Eigen::SparseMatrix<double> permuted_lower_a_;  // lower triangle of P A P', diagonal included
  std::vector<Eigen::Index> diagonal_positions_;  // of its diagonal entries among its values
};

double log_determinant(const SparseFactor& factor) {
  return 2.0 * factor.matrixL().nestedExpression().diagonal().array().log().sum();
}

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
    dense_starts_.push_back(0);
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
      limit_range(solver.eigenvalues()[0], component.samples);
      Decomposed decomposed{component.samples, solver.eigenvectors(), offset, nullptr, nullptr};
      if (component.samples.size() > kDenseWhiteningLimit) {
        decomposed.sparse = std::make_unique<SparseH>(component);
      } else {
        dense_samples_.insert(dense_samples_.end(), component.samples.begin(), component.samples.end());
        dense_starts_.push_back(dense_samples_.size());
        largest_dense_ = std::max(largest_dense_, component.samples.size());
      }
      components_.push_back(std::move(decomposed));
      offset += size;
    }
  }

  Eigen::Index row_count() const override { return eigenvalues_.size(); }
  const AdmissibleRange& admissible_range() const override { return range_; }

  Eigen::MatrixXd to_working_rows(const Eigen::Ref<const Eigen::MatrixXd>& columns) const override {
    Eigen::MatrixXd working(row_count(), columns.cols());
    Eigen::Index offset = 0;
    for (std::uint32_t sample : singletons_) working.row(offset++) = columns.row(sample);
    for (const Decomposed& component : components_) {
      working.middleRows(component.offset, component.eigenvectors.rows()).noalias() =
          component.eigenvectors.transpose() * columns(component.samples, Eigen::all);
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

  // W_c = D^-1/2 U' (row-major, for whiten_block's loop) for the small
  // components, L^-1 P for the larger ones.
  void set_whitening(double h2) override {
    const Eigen::ArrayXd scale = (1.0 + h2 * (eigenvalues_.array() - 1.0)).rsqrt();
    // A singleton with A_jj = 1 (the usual case) has H_jj = 1: nothing to do.
    scaled_singletons_.clear();
    singleton_scales_.clear();
    for (std::size_t single_idx = 0; single_idx < singletons_.size(); ++single_idx) {
      if (scale[static_cast<Eigen::Index>(single_idx)] == 1.0) continue;
      scaled_singletons_.push_back(singletons_[single_idx]);
      singleton_scales_.push_back(scale[static_cast<Eigen::Index>(single_idx)]);
    }
    dense_whitening_.clear();
    for (Decomposed& component : components_) {
      if (component.sparse) {
        component.factor = component.sparse->whitening_factor_at(h2);
        continue;
      }
      const Eigen::Index size = component.eigenvectors.rows();
      const RowMajorMatrix whitening =
          scale.segment(component.offset, size).matrix().asDiagonal() * component.eigenvectors.transpose();
      dense_whitening_.insert(dense_whitening_.end(), whitening.data(), whitening.data() + size * size);
    }
  }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    for (std::size_t scaled_idx = 0; scaled_idx < scaled_singletons_.size(); ++scaled_idx) {
      double* row = genotypes + row_of_sample[scaled_singletons_[scaled_idx]] * width;
      const double scale = singleton_scales_[scaled_idx];
      for (std::size_t col = 0; col < width; ++col) row[col] *= scale;
    }
    whiten_small_components(genotypes, width, row_of_sample, scratch);
    for (const Decomposed& component : components_) {
      if (component.sparse) {
        component.sparse->whiten_block(*component.factor, component.samples, genotypes, width, row_of_sample,
                                       scratch);
      }
    }
  }

 private:
  struct Decomposed {
    std::vector<std::uint32_t> samples;
    Eigen::MatrixXd eigenvectors;         // U, columns in the order of its eigenvalues
    Eigen::Index offset = 0;              // its first working row
    std::unique_ptr<SparseH> sparse;      // above kDenseWhiteningLimit: H_c for the whitening factor
    std::unique_ptr<SparseFactor> factor; // ... and the factor at the fixed h2
  };

  // out_j = sum_l W_jl in_l over each small component's rows, one fixed
  // sequence of rounded operations per value: a variant's whitened values do
  // not depend on the block's other variants or its width.
  void whiten_small_components(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                               std::vector<double>& scratch) const {
    scratch.resize(largest_dense_ * width);
    double* gathered = scratch.data();
    const double* whitening = dense_whitening_.data();
    for (std::size_t comp_idx = 0; comp_idx + 1 < dense_starts_.size(); ++comp_idx) {
      const std::uint32_t* samples = dense_samples_.data() + dense_starts_[comp_idx];
      const std::size_t size = dense_starts_[comp_idx + 1] - dense_starts_[comp_idx];
      gather_rows(genotypes, width, row_of_sample, samples, size, gathered);
      for (std::size_t out_idx = 0; out_idx < size; ++out_idx) {
        const double* weights = whitening + out_idx * size;
        double* out = genotypes + row_of_sample[samples[out_idx]] * width;
        for (std::size_t col = 0; col < width; ++col) out[col] = weights[0] * gathered[col];
        for (std::size_t in_idx = 1; in_idx < size; ++in_idx) {
          const double weight = weights[in_idx];
          const double* in = gathered + in_idx * width;
          for (std::size_t col = 0; col < width; ++col) out[col] += weight * in[col];
        }
      }
      whitening += size * size;
    }
  }

  void limit_range(double smallest_eigenvalue, std::vector<std::uint32_t> samples) {
    const double h2_max = admissible_h2_for(smallest_eigenvalue);
    if (h2_max < range_.h2_max) range_ = {h2_max, std::move(samples), smallest_eigenvalue};
  }

  std::vector<std::uint32_t> singletons_;
  // The singletons whose H_jj is not 1 at the fixed h2, and their H_jj^-1/2.
  std::vector<std::uint32_t> scaled_singletons_;
  std::vector<double> singleton_scales_;
  std::vector<Decomposed> components_;
  Eigen::VectorXd eigenvalues_;  // of A, in working-row order: singletons, then each component's
  // The small components whitened by W_c: their samples back to back, where
  // each starts, and their W_c (row-major) back to back.
  std::vector<std::uint32_t> dense_samples_;
  std::vector<std::size_t> dense_starts_;
  std::vector<double> dense_whitening_;
  std::size_t largest_dense_ = 0;
  AdmissibleRange range_;
};

class SparseWhitening final : public ComponentWhitening {
 public:
  SparseWhitening(const RelatedComponent& component, double h2)
      : samples_(component.samples), h_(component), factor_(h_.whitening_factor_at(h2)) {}

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    h_.whiten_block(*factor_, samples_, genotypes, width, row_of_sample, scratch);
  }

 private:
  std::vector<std::uint32_t> samples_;
  SparseH h_;
  std::unique_ptr<SparseFactor> factor_;
};

class SparseComponent final : public CovarianceFactor {
 public:
  explicit SparseComponent(const RelatedComponent& component) : samples_(component.samples), h_(component) {
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
    const std::unique_ptr<SparseFactor> factor = h_.factor_at(h2);
    if (!factor) return std::numeric_limits<double>::quiet_NaN();
    const RowMajorMatrix whitened = h_.whiten(*factor, working);
    gram.noalias() += whitened.transpose() * whitened;
    return log_determinant(*factor);
  }

  void set_whitening(double h2) override { whitening_ = h_.whitening_factor_at(h2); }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    h_.whiten_block(*whitening_, samples_, genotypes, width, row_of_sample, scratch);
  }

 private:
  // H is positive definite on [0, h*) (it is linear in h2 and H(0) = I), so
  // h* is found by bisection when H does not factor at the cap; then
  // lambda_min(A) = 1 - 1 / h*, and the range ends where the dense path's
  // would (admissible_h2_for).
  void find_admissible_range() {
    const double cap = 1.0 - kSmallestEigenvalueOfH;
    if (h_.factor_at(cap)) return;
    double factorable = 0.0, failing = cap;
    while (failing - factorable > 1e-10 * failing) {
      const double middle = 0.5 * (factorable + failing);
      (h_.factor_at(middle) ? factorable : failing) = middle;
    }
    const double smallest_eigenvalue = 1.0 - 1.0 / failing;
    range_ = {admissible_h2_for(smallest_eigenvalue), samples_, smallest_eigenvalue};
  }

  std::vector<std::uint32_t> samples_;
  SparseH h_;
  std::unique_ptr<SparseFactor> whitening_;  // the factor at the fixed h2
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
  return std::make_unique<SparseComponent>(component);
}

SparseFactorShares sparse_factor_shares(const RelatedComponent& component) {
  Permutation permutation;
  const std::vector<std::int64_t> counts = cholesky_column_counts(ordered_lower_triangle(component, permutation));
  double entries = 0.0, dense_entries = 0.0, work = 0.0, dense_work = 0.0;
  for (std::size_t col = 0; col < counts.size(); ++col) {
    const auto count = static_cast<double>(counts[col]), dense_count = static_cast<double>(counts.size() - col);
    entries += count;
    dense_entries += dense_count;
    work += count * count;
    dense_work += dense_count * dense_count;
  }
  return {entries / dense_entries, work / dense_work};
}

std::unique_ptr<ComponentWhitening> make_sparse_whitening(const RelatedComponent& component, double h2) {
  return std::make_unique<SparseWhitening>(component, h2);
}

}  // namespace tamis::detail
