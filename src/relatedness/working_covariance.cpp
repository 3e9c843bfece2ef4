#include "relatedness/working_covariance.hpp"

#include <algorithm>
#include <cmath>

#include "relatedness/component_factor.hpp"
#include "tamis/mixed_model.hpp"

namespace tamis::detail {
namespace {

using RowMajorMatrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;
using SparseLlt = Eigen::SimplicialLLT<Eigen::SparseMatrix<double>, Eigen::Lower, Eigen::AMDOrdering<int>>;

// Unit vectors solved together when diag(M^-1) of a sparse block is built.
constexpr Eigen::Index kInverseChunk = 64;

// rows <- L^-1 rows for a dense lower L and a row-major k x width block:
// forward substitution, one fixed sequence of operations per column.
void solve_dense_lower_in_place(const Eigen::MatrixXd& lower, double* rows, std::size_t width) {
  const Eigen::Index size = lower.rows();
  for (Eigen::Index row = 0; row < size; ++row) {
    double* target = rows + static_cast<std::size_t>(row) * width;
    for (Eigen::Index done = 0; done < row; ++done) {
      const double weight = lower(row, done);
      const double* source = rows + static_cast<std::size_t>(done) * width;
      for (std::size_t col = 0; col < width; ++col) target[col] -= weight * source[col];
    }
    const double pivot = lower(row, row);
    for (std::size_t col = 0; col < width; ++col) target[col] /= pivot;
  }
}

// A group whose sparse Cholesky factor would fill in (relatedness spread by
// population structure) is factored densely: a blocked dense factorisation
// runs many times faster than a sparse one of the same size.
bool fills_in(const std::vector<std::uint32_t>& samples, const Eigen::SparseMatrix<double>& lower) {
  if (samples.size() > kDenseComponentLimit) return false;
  RelatedComponent component;
  component.samples = samples;
  for (Eigen::Index col = 0; col < lower.outerSize(); ++col) {
    for (Eigen::SparseMatrix<double>::InnerIterator entry(lower, col); entry; ++entry) {
      if (entry.row() == col) {
        component.diagonal.push_back(entry.value());
      } else {
        component.pairs.emplace_back(static_cast<int>(entry.row()), static_cast<int>(col), entry.value());
      }
    }
  }
  return sparse_factor_shares(component).work >= kSparseWorkShare;
}

}  // namespace

std::shared_ptr<const RelatednessBlocks> RelatednessBlocks::from(
    const SparseRelatedness& relatedness, const std::vector<std::vector<std::uint32_t>>& components) {
  auto out = std::make_shared<RelatednessBlocks>();
  out->sample_count = relatedness.sample_count;
  std::vector<std::int64_t> block_of(relatedness.sample_count, -1);
  std::vector<int> local_of(relatedness.sample_count, 0);
  std::vector<std::vector<Eigen::Triplet<double>>> entries(components.size());
  for (std::size_t block_idx = 0; block_idx < components.size(); ++block_idx) {
    const auto& samples = components[block_idx];
    for (std::size_t local = 0; local < samples.size(); ++local) {
      block_of[samples[local]] = static_cast<std::int64_t>(block_idx);
      local_of[samples[local]] = static_cast<int>(local);
      entries[block_idx].emplace_back(static_cast<int>(local), static_cast<int>(local),
                                      relatedness.diagonal[samples[local]]);
    }
  }
  for (const RelatednessPair& pair : relatedness.pairs) {
    const auto block_idx = static_cast<std::size_t>(block_of[pair.first]);
    entries[block_idx].emplace_back(local_of[pair.second], local_of[pair.first], pair.value);
  }
  for (std::uint32_t sample = 0; sample < relatedness.sample_count; ++sample) {
    if (block_of[sample] >= 0) continue;
    out->singletons.push_back(sample);
    out->singleton_diagonal.push_back(relatedness.diagonal[sample]);
  }
  for (std::size_t block_idx = 0; block_idx < components.size(); ++block_idx) {
    Block block;
    block.samples = components[block_idx];
    const auto size = static_cast<Eigen::Index>(block.samples.size());
    Eigen::SparseMatrix<double> lower(size, size);
    lower.setFromTriplets(entries[block_idx].begin(), entries[block_idx].end());
    lower.makeCompressed();
    if (block.samples.size() <= kDenseWorkingLimit || fills_in(block.samples, lower)) {
      const Eigen::SparseMatrix<double> full = lower.selfadjointView<Eigen::Lower>();
      block.dense = Eigen::MatrixXd(full);
    } else {
      block.lower = std::move(lower);
    }
    out->blocks.push_back(std::move(block));
  }
  return out;
}

struct WorkingCovariance::Factor {
  Eigen::MatrixXd lower;               // dense blocks: L of M_c = L L'
  std::unique_ptr<SparseLlt> sparse;   // sparse blocks: P M_c P' = L L'
  Eigen::SparseMatrix<double> values;  // sparse blocks: M_c's lower triangle (A_c's pattern)
};

WorkingCovariance::WorkingCovariance(std::shared_ptr<const RelatednessBlocks> blocks) : blocks_(std::move(blocks)) {
  for (const RelatednessBlocks::Block& block : blocks_->blocks) {
    auto factor = std::make_unique<Factor>();
    if (block.dense.size() == 0) {
      factor->values = block.lower;
      factor->sparse = std::make_unique<SparseLlt>();
      factor->sparse->analyzePattern(factor->values);
    }
    factors_.push_back(std::move(factor));
  }
}

WorkingCovariance::~WorkingCovariance() = default;
WorkingCovariance::WorkingCovariance(WorkingCovariance&&) noexcept = default;
WorkingCovariance& WorkingCovariance::operator=(WorkingCovariance&&) noexcept = default;

bool WorkingCovariance::factor(const Eigen::VectorXd& root_weights, double tau) {
  const RelatednessBlocks& blocks = *blocks_;
  singleton_pivots_.resize(static_cast<Eigen::Index>(blocks.singletons.size()));
  for (std::size_t single_idx = 0; single_idx < blocks.singletons.size(); ++single_idx) {
    const double w = root_weights[blocks.singletons[single_idx]];
    const double m = 1.0 + tau * w * w * blocks.singleton_diagonal[single_idx];
    if (!(m > 0.0) || !std::isfinite(m)) return false;
    singleton_pivots_[static_cast<Eigen::Index>(single_idx)] = std::sqrt(m);
  }
  for (std::size_t block_idx = 0; block_idx < blocks.blocks.size(); ++block_idx) {
    const RelatednessBlocks::Block& block = blocks.blocks[block_idx];
    Factor& factor = *factors_[block_idx];
    const Eigen::VectorXd d = root_weights(block.samples);
    if (factor.sparse) {
      // M_c = I + tau D A_c D on A_c's own pattern (its diagonal always stored).
      const Eigen::SparseMatrix<double>& a = block.lower;  // compressed; factor.values is its copy
      const int* starts = a.outerIndexPtr();
      const int* rows = a.innerIndexPtr();
      const double* a_values = a.valuePtr();
      double* values = factor.values.valuePtr();
      for (Eigen::Index col = 0; col < a.outerSize(); ++col) {
        for (int position = starts[col]; position < starts[col + 1]; ++position) {
          const Eigen::Index row = rows[position];
          values[position] = tau * d[row] * a_values[position] * d[col] + (row == col ? 1.0 : 0.0);
        }
      }
      factor.sparse->factorize(factor.values);
      if (factor.sparse->info() != Eigen::Success) return false;
      const Eigen::VectorXd pivots = factor.sparse->matrixL().nestedExpression().diagonal();
      if (!(pivots.array() > 0.0).all() || !pivots.allFinite()) return false;
      continue;
    }
    // In place, in the factor's own storage: a fit factors thousands of times.
    factor.lower.noalias() = tau * d.asDiagonal() * block.dense * d.asDiagonal();
    factor.lower.diagonal().array() += 1.0;
    Eigen::LLT<Eigen::Ref<Eigen::MatrixXd>> llt(factor.lower);
    if (llt.info() != Eigen::Success) return false;
    factor.lower.triangularView<Eigen::StrictlyUpper>().setZero();
    if (!(factor.lower.diagonal().array() > 0.0).all() || !factor.lower.allFinite()) return false;
  }
  return true;
}

double WorkingCovariance::log_determinant() const {
  double total = 2.0 * singleton_pivots_.array().log().sum();
  for (const auto& factor : factors_) {
    const Eigen::VectorXd pivots =
        factor->sparse ? Eigen::VectorXd(factor->sparse->matrixL().nestedExpression().diagonal())
                       : Eigen::VectorXd(factor->lower.diagonal());
    total += 2.0 * pivots.array().log().sum();
  }
  return total;
}

Eigen::MatrixXd WorkingCovariance::solve(const Eigen::MatrixXd& columns) const {
  const RelatednessBlocks& blocks = *blocks_;
  Eigen::MatrixXd out(columns.rows(), columns.cols());
  for (std::size_t single_idx = 0; single_idx < blocks.singletons.size(); ++single_idx) {
    const double pivot = singleton_pivots_[static_cast<Eigen::Index>(single_idx)];
    out.row(blocks.singletons[single_idx]) = columns.row(blocks.singletons[single_idx]) / (pivot * pivot);
  }
  for (std::size_t block_idx = 0; block_idx < blocks.blocks.size(); ++block_idx) {
    const auto& samples = blocks.blocks[block_idx].samples;
    const Factor& factor = *factors_[block_idx];
    const Eigen::MatrixXd part = columns(samples, Eigen::all);
    if (factor.sparse) {
      out(samples, Eigen::all) = factor.sparse->solve(part);
    } else {
      Eigen::MatrixXd solved = factor.lower.triangularView<Eigen::Lower>().solve(part);
      factor.lower.triangularView<Eigen::Lower>().transpose().solveInPlace(solved);
      out(samples, Eigen::all) = solved;
    }
  }
  return out;
}

Eigen::MatrixXd WorkingCovariance::whiten(const Eigen::MatrixXd& columns) const {
  RowMajorMatrix rows = columns;
  std::vector<std::size_t> identity(static_cast<std::size_t>(columns.rows()));
  for (std::size_t row = 0; row < identity.size(); ++row) identity[row] = row;
  whiten_block(rows.data(), static_cast<std::size_t>(columns.cols()), identity);
  return rows;
}

void WorkingCovariance::whiten_block(double* genotypes, std::size_t width,
                                     const std::vector<std::size_t>& row_of_sample) const {
  const RelatednessBlocks& blocks = *blocks_;
  for (std::size_t single_idx = 0; single_idx < blocks.singletons.size(); ++single_idx) {
    double* row = genotypes + row_of_sample[blocks.singletons[single_idx]] * width;
    const double pivot = singleton_pivots_[static_cast<Eigen::Index>(single_idx)];
    for (std::size_t col = 0; col < width; ++col) row[col] /= pivot;
  }
  std::vector<double> buffer;
  for (std::size_t block_idx = 0; block_idx < blocks.blocks.size(); ++block_idx) {
    const auto& samples = blocks.blocks[block_idx].samples;
    const Factor& factor = *factors_[block_idx];
    buffer.resize(samples.size() * width);
    // Gathered in the factor's order: P for a sparse factor, as given for a dense one.
    const int* position = factor.sparse ? factor.sparse->permutationP().indices().data() : nullptr;
    for (std::size_t local = 0; local < samples.size(); ++local) {
      const std::size_t target = position ? static_cast<std::size_t>(position[local]) : local;
      const double* source = genotypes + row_of_sample[samples[local]] * width;
      std::copy(source, source + width, buffer.data() + target * width);
    }
    if (factor.sparse) {
      solve_sparse_lower_in_place(factor.sparse->matrixL().nestedExpression(), buffer.data(), width);
    } else {
      solve_dense_lower_in_place(factor.lower, buffer.data(), width);
    }
    for (std::size_t local = 0; local < samples.size(); ++local) {
      std::copy(buffer.data() + local * width, buffer.data() + (local + 1) * width,
                genotypes + row_of_sample[samples[local]] * width);
    }
  }
}

Eigen::VectorXd WorkingCovariance::inverse_diagonal() const {
  const RelatednessBlocks& blocks = *blocks_;
  Eigen::VectorXd out(static_cast<Eigen::Index>(blocks.sample_count));
  for (std::size_t single_idx = 0; single_idx < blocks.singletons.size(); ++single_idx) {
    const double pivot = singleton_pivots_[static_cast<Eigen::Index>(single_idx)];
    out[blocks.singletons[single_idx]] = 1.0 / (pivot * pivot);
  }
  for (std::size_t block_idx = 0; block_idx < blocks.blocks.size(); ++block_idx) {
    const auto& samples = blocks.blocks[block_idx].samples;
    const Factor& factor = *factors_[block_idx];
    const auto size = static_cast<Eigen::Index>(samples.size());
    // diag(M^-1)_j = |W e_j|^2, W = L^-1 (P).
    if (!factor.sparse) {
      const Eigen::MatrixXd inverse_factor =
          factor.lower.triangularView<Eigen::Lower>().solve(Eigen::MatrixXd::Identity(size, size));
      const Eigen::VectorXd squares = inverse_factor.colwise().squaredNorm().transpose();
      for (Eigen::Index local = 0; local < size; ++local) out[samples[static_cast<std::size_t>(local)]] = squares[local];
      continue;
    }
    const int* position = factor.sparse->permutationP().indices().data();
    for (Eigen::Index first = 0; first < size; first += kInverseChunk) {
      const Eigen::Index count = std::min(kInverseChunk, size - first);
      RowMajorMatrix units = RowMajorMatrix::Zero(size, count);
      for (Eigen::Index unit = 0; unit < count; ++unit) units(position[first + unit], unit) = 1.0;
      solve_sparse_lower_in_place(factor.sparse->matrixL().nestedExpression(), units.data(),
                                  static_cast<std::size_t>(count));
      const Eigen::VectorXd squares = units.colwise().squaredNorm().transpose();
      for (Eigen::Index unit = 0; unit < count; ++unit) {
        out[samples[static_cast<std::size_t>(first + unit)]] = squares[unit];
      }
    }
  }
  return out;
}

}  // namespace tamis::detail
