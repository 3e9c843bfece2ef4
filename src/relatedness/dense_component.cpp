// One connected component of A handled densely: reduced once to tridiagonal
// form for the likelihood at any h2, whitened by the dense Cholesky factor
// of H_c at the fixed h2 (or by the sparse one, where that stays sparse).
//
// For a component whose sparse Cholesky factor fills in (relatedness spread
// by population structure links most of a cohort into one group), each
// sparse factorisation costs about as much as a dense one, and the fit asks
// for dozens; an eigendecomposition costs many dense factorisations. The
// Householder reduction Q' A_c Q = T costs 4/3 k^3 flops once, and since
// H_c(h2) = Q ((1 - h2) I + h2 T) Q', every h2 afterwards costs O(k) per
// working column.
#include <Eigen/Eigenvalues>
#include <Eigen/Householder>
#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>

#include "common/vector_clones.hpp"
#include "relatedness/component_factor.hpp"
#include "tamis/errors.hpp"

namespace tamis::detail {
namespace {

// Columns reduced together before the trailing matrix is updated by one
// rank-2b product (level-3 work, in place of b rank-2 updates).
constexpr Eigen::Index kReductionPanel = 32;
// The whitening's register tile: rows of the block computed together, and
// columns (variants) per vector. Blocks are padded to a multiple of the
// columns.
constexpr std::size_t kSolveRows = 4;
constexpr std::size_t kSolveColumns = 8;

// The symmetric tridiagonal T = Q' A Q and Q as Householder reflections:
// Q = H_0 H_1 ... H_{k-2}, H_c = I - tau_c v_c v_c', where v_c is 0 above
// row c + 1, 1 at row c + 1 and `vectors`(c + 2.., c) below (the layout of
// Eigen's HouseholderSequence with shift 1).
struct Tridiagonal {
  Eigen::MatrixXd vectors;
  Eigen::VectorXd coefficients;   // tau_c
  Eigen::VectorXd diagonal;       // T_cc
  Eigen::VectorXd off_diagonal;   // T_c+1,c

  auto q() const {
    return Eigen::HouseholderSequence<Eigen::MatrixXd, Eigen::VectorXd>(vectors, coefficients)
        .setLength(vectors.rows() - 1)
        .setShift(1);
  }
};

// Lanes of the symmetric product's partial sums: a fixed number, so that its
// sums are the same whatever the vector extension.
constexpr std::size_t kProductLanes = 8;
typedef double ProductLanes __attribute__((vector_size(kProductLanes * sizeof(double))));

// y = A x for a symmetric A of order n held in the lower triangle of
// column-major storage (leading dimension `stride`), reading each stored
// value once: the product is most of the reduction's time, and it is bound
// by how fast the trailing matrix streams through. Four columns at a time:
// each serves the rows below them (y_i += A_ij x_j) and their own entries
// (y_j += A_ij x_i, summed in kProductLanes partial sums added in order).
TAMIS_VECTOR_CLONES
void symmetric_product(const double* a, std::size_t stride, std::size_t n, const double* x, double* y) {
  constexpr std::size_t kColumns = 4;
  std::fill(y, y + n, 0.0);
  std::size_t col = 0;
  for (; col + kColumns <= n; col += kColumns) {
    const double* c0 = a + col * stride;
    const double *c1 = c0 + stride, *c2 = c1 + stride, *c3 = c2 + stride;
    const double x0 = x[col], x1 = x[col + 1], x2 = x[col + 2], x3 = x[col + 3];
    // The 4 x 4 block on the diagonal, from its lower triangle.
    const double own0 = c0[col] * x0 + c0[col + 1] * x1 + c0[col + 2] * x2 + c0[col + 3] * x3;
    const double own1 = c0[col + 1] * x0 + c1[col + 1] * x1 + c1[col + 2] * x2 + c1[col + 3] * x3;
    const double own2 = c0[col + 2] * x0 + c1[col + 2] * x1 + c2[col + 2] * x2 + c2[col + 3] * x3;
    const double own3 = c0[col + 3] * x0 + c1[col + 3] * x1 + c2[col + 3] * x2 + c3[col + 3] * x3;
    ProductLanes below0 = {}, below1 = {}, below2 = {}, below3 = {};
    std::size_t row = col + kColumns;
    for (; row + kProductLanes <= n; row += kProductLanes) {
      ProductLanes a0, a1, a2, a3, x_rows, y_rows;
      std::memcpy(&a0, c0 + row, sizeof a0);
      std::memcpy(&a1, c1 + row, sizeof a1);
      std::memcpy(&a2, c2 + row, sizeof a2);
      std::memcpy(&a3, c3 + row, sizeof a3);
      std::memcpy(&x_rows, x + row, sizeof x_rows);
      std::memcpy(&y_rows, y + row, sizeof y_rows);
      y_rows = y_rows + a0 * x0 + a1 * x1 + a2 * x2 + a3 * x3;
      std::memcpy(y + row, &y_rows, sizeof y_rows);
      below0 += a0 * x_rows;
      below1 += a1 * x_rows;
      below2 += a2 * x_rows;
      below3 += a3 * x_rows;
    }
    double tail0 = 0.0, tail1 = 0.0, tail2 = 0.0, tail3 = 0.0;
    for (; row < n; ++row) {
      y[row] = y[row] + c0[row] * x0 + c1[row] * x1 + c2[row] * x2 + c3[row] * x3;
      tail0 += c0[row] * x[row];
      tail1 += c1[row] * x[row];
      tail2 += c2[row] * x[row];
      tail3 += c3[row] * x[row];
    }
    for (std::size_t lane = 0; lane < kProductLanes; ++lane) {
      tail0 += below0[lane];
      tail1 += below1[lane];
      tail2 += below2[lane];
      tail3 += below3[lane];
    }
    y[col] += own0 + tail0;
    y[col + 1] += own1 + tail1;
    y[col + 2] += own2 + tail2;
    y[col + 3] += own3 + tail3;
  }
  for (; col < n; ++col) {
    const double* column = a + col * stride;
    double own = column[col] * x[col];
    for (std::size_t row = col + 1; row < n; ++row) {
      y[row] += column[row] * x[col];
      own += column[row] * x[row];
    }
    y[col] += own;
  }
}

// Blocked Householder reduction of a symmetric matrix (lower triangle used),
// in place (Dongarra, Hammarling & Sorensen 1989, J. Comput. Appl. Math.
// 27:215-227). Within a panel each reflector's product with the trailing
// matrix, A v, is corrected for the panel's earlier reflectors held as
// A - V W' - W V', and the trailing matrix is updated once per panel.
Tridiagonal reduce_to_tridiagonal(Eigen::MatrixXd a) {
  const Eigen::Index size = a.rows();
  Tridiagonal out;
  out.diagonal.resize(size);
  out.off_diagonal.resize(std::max<Eigen::Index>(size - 1, 0));
  out.coefficients.resize(std::max<Eigen::Index>(size - 1, 0));
  Eigen::MatrixXd v(size, kReductionPanel), w(size, kReductionPanel);
  for (Eigen::Index panel_start = 0; panel_start < size - 1;) {
    const Eigen::Index panel = std::min(kReductionPanel, size - 1 - panel_start);
    v.setZero();
    w.setZero();
    for (Eigen::Index step = 0; step < panel; ++step) {
      const Eigen::Index col = panel_start + step, below = size - col - 1;
      // Column col as the panel's earlier reflectors have left it.
      auto column = a.col(col).tail(below + 1);
      column.noalias() -= v.block(col, 0, below + 1, step) * w.row(col).head(step).transpose();
      column.noalias() -= w.block(col, 0, below + 1, step) * v.row(col).head(step).transpose();
      out.diagonal[col] = a(col, col);
      double tau = 0.0, beta = 0.0;
      auto reflected = a.col(col).tail(below);
      reflected.makeHouseholderInPlace(tau, beta);
      out.off_diagonal[col] = beta;
      out.coefficients[col] = tau;
      auto reflector = v.col(step).tail(below);
      reflector[0] = 1.0;
      reflector.tail(below - 1) = reflected.tail(below - 1);
      // w = tau (A - V W' - W V') v, then w -= (tau / 2)(w'v) v, so that the
      // two-sided reflection of the trailing matrix is A - v w' - w v'.
      auto product = w.col(step).tail(below);
      symmetric_product(&a(col + 1, col + 1), static_cast<std::size_t>(a.outerStride()),
                        static_cast<std::size_t>(below), reflector.data(), product.data());
      const auto earlier_v = v.block(col + 1, 0, below, step);
      const auto earlier_w = w.block(col + 1, 0, below, step);
      const Eigen::VectorXd w_dot_v = earlier_w.transpose() * reflector;
      const Eigen::VectorXd v_dot_v = earlier_v.transpose() * reflector;
      product.noalias() -= earlier_v * w_dot_v;
      product.noalias() -= earlier_w * v_dot_v;
      product *= tau;
      product += (-0.5 * tau * product.dot(reflector)) * reflector;
    }
    const Eigen::Index trailing_start = panel_start + panel, trailing = size - trailing_start;
    auto trailing_block = a.bottomRightCorner(trailing, trailing).triangularView<Eigen::Lower>();
    trailing_block -= v.bottomRows(trailing).leftCols(panel) * w.bottomRows(trailing).leftCols(panel).transpose();
    trailing_block -= w.bottomRows(trailing).leftCols(panel) * v.bottomRows(trailing).leftCols(panel).transpose();
    panel_start = trailing_start;
  }
  if (size > 0) out.diagonal[size - 1] = a(size - 1, size - 1);
  out.vectors = std::move(a);
  return out;
}

// A group of kSolveColumns values of one row, in vector registers.
typedef double SolveLanes __attribute__((vector_size(kSolveColumns * sizeof(double))));

// sums[r][begin, end) -= L_{r,done} x_done[begin, end) for done in [from, to)
// in that order, for `count` rows whose rows of L start at l_rows[r].
TAMIS_ALWAYS_INLINE void subtract_solved(const double* const* l_rows, std::size_t count, const double* rows,
                                         std::size_t width, std::size_t from, std::size_t to, std::size_t begin,
                                         std::size_t end, double* sums) {
  for (std::size_t done = from; done < to; ++done) {
    const double* solved = rows + done * width;
    for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
      const double weight = l_rows[row_idx][done];
      double* sum = sums + row_idx * width;
      for (std::size_t col = begin; col < end; ++col) sum[col] -= weight * solved[col];
    }
  }
}

// The same for kSolveRows rows and kSolveColumns columns from `first_column`
// over all done < to, with the sums held in registers throughout.
TAMIS_ALWAYS_INLINE void subtract_solved_tile(const double* const* l_rows, const double* rows, std::size_t width,
                                              std::size_t to, std::size_t first_column, double* sums) {
  static_assert(kSolveRows == 4, "the tile holds four rows");
  SolveLanes sum[kSolveRows];
  for (std::size_t row_idx = 0; row_idx < kSolveRows; ++row_idx) {
    std::memcpy(&sum[row_idx], sums + row_idx * width + first_column, sizeof(SolveLanes));
  }
  const double *l0 = l_rows[0], *l1 = l_rows[1], *l2 = l_rows[2], *l3 = l_rows[3];
  for (std::size_t done = 0; done < to; ++done) {
    SolveLanes solved;
    std::memcpy(&solved, rows + done * width + first_column, sizeof(SolveLanes));
    sum[0] -= l0[done] * solved;
    sum[1] -= l1[done] * solved;
    sum[2] -= l2[done] * solved;
    sum[3] -= l3[done] * solved;
  }
  for (std::size_t row_idx = 0; row_idx < kSolveRows; ++row_idx) {
    std::memcpy(sums + row_idx * width + first_column, &sum[row_idx], sizeof(SolveLanes));
  }
}

// x <- L^-1 x for the rows of a row-major block, L dense lower triangular
// with its rows packed one after another (row i holds i + 1 values). Each
// value is x_i = (b_i - L_i0 x_0 - L_i1 x_1 - ... ) / L_ii with the
// subtractions in that order, whatever the block's width or the column's
// place in it: a variant's values do not depend on its neighbours (nor on
// the vector extension, with contraction off). The block's rows are taken
// kSolveRows at a time and its columns kSolveColumns at a time (any
// remainder one by one), so that each value of L and of x read serves
// several sums held in registers. Fastest for widths that are multiples of
// kSolveColumns.
TAMIS_VECTOR_CLONES
void solve_packed_lower_in_place(const std::vector<double>& packed, std::size_t size, double* rows,
                                 std::size_t width) {
  std::vector<double> sums(kSolveRows * width);
  const std::size_t tiled_width = width / kSolveColumns * kSolveColumns;
  for (std::size_t first = 0; first < size; first += kSolveRows) {
    const std::size_t count = std::min(kSolveRows, size - first);
    std::copy(rows + first * width, rows + (first + count) * width, sums.begin());
    const double* l_rows[kSolveRows];
    for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
      l_rows[row_idx] = packed.data() + (first + row_idx) * (first + row_idx + 1) / 2;
    }
    const std::size_t tiled = count == kSolveRows ? tiled_width : 0;
    for (std::size_t column = 0; column < tiled; column += kSolveColumns) {
      subtract_solved_tile(l_rows, rows, width, first, column, sums.data());
    }
    subtract_solved(l_rows, count, rows, width, 0, first, tiled, width, sums.data());
    // The group's own rows in turn: each one's earlier rows are solved.
    for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
      double* sum = sums.data() + row_idx * width;
      subtract_solved(l_rows + row_idx, 1, rows, width, first, first + row_idx, 0, width, sum);
      const double pivot = l_rows[row_idx][first + row_idx];
      double* out = rows + (first + row_idx) * width;
      for (std::size_t col = 0; col < width; ++col) out[col] = sum[col] / pivot;
    }
  }
}

// W = L^-1 by the dense Cholesky factor of H_c(h2).
class DenseWhitening final : public ComponentWhitening {
 public:
  DenseWhitening(const std::vector<std::uint32_t>& samples, Eigen::MatrixXd h) : samples_(samples) {
    Eigen::LLT<Eigen::Ref<Eigen::MatrixXd>> cholesky(h);
    if (cholesky.info() != Eigen::Success) {
      throw Error(ExitCode::internal, "mixed model", "H is not positive definite at the fitted h2");
    }
    const std::size_t size = samples_.size();
    packed_factor_.resize(size * (size + 1) / 2);
    for (std::size_t row = 0; row < size; ++row) {
      for (std::size_t col = 0; col <= row; ++col) {
        packed_factor_[row * (row + 1) / 2 + col] = h(static_cast<Eigen::Index>(row), static_cast<Eigen::Index>(col));
      }
    }
  }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    const std::size_t size = samples_.size();
    const std::size_t padded = (width + kSolveColumns - 1) / kSolveColumns * kSolveColumns;
    scratch.assign(size * padded, 0.0);
    for (std::size_t local = 0; local < size; ++local) {
      const double* source = genotypes + row_of_sample[samples_[local]] * width;
      std::copy(source, source + width, scratch.data() + local * padded);
    }
    solve_packed_lower_in_place(packed_factor_, size, scratch.data(), padded);
    for (std::size_t local = 0; local < size; ++local) {
      const double* solved = scratch.data() + local * padded;
      std::copy(solved, solved + width, genotypes + row_of_sample[samples_[local]] * width);
    }
  }

 private:
  std::vector<std::uint32_t> samples_;
  std::vector<double> packed_factor_;  // the factor's rows one after another
};

class DenseComponent final : public CovarianceFactor {
 public:
  DenseComponent(RelatedComponent component, bool whiten_by_sparse_factor)
      : component_(std::move(component)), whiten_by_sparse_factor_(whiten_by_sparse_factor) {
    tridiagonal_ = reduce_to_tridiagonal(dense_a());
    Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eigenvalues;
    eigenvalues.computeFromTridiagonal(tridiagonal_.diagonal, tridiagonal_.off_diagonal, Eigen::EigenvaluesOnly);
    const double smallest = eigenvalues.eigenvalues()[0];
    const double h2_max = admissible_h2_for(smallest);
    if (h2_max < range_.h2_max) range_ = {h2_max, component_.samples, smallest};
  }

  Eigen::Index row_count() const override { return static_cast<Eigen::Index>(component_.samples.size()); }
  const AdmissibleRange& admissible_range() const override { return range_; }

  // Q' z: the coordinates in which H_c is tridiagonal at every h2.
  Eigen::MatrixXd to_working_rows(const Eigen::Ref<const Eigen::MatrixXd>& columns) const override {
    Eigen::MatrixXd working = columns(component_.samples, Eigen::all);
    if (working.rows() > 1) working.applyOnTheLeft(tridiagonal_.q().adjoint());
    return working;
  }

  // (1 - h2) I + h2 T = L D L' with L unit lower bidiagonal (no pivoting:
  // stable for a positive definite tridiagonal), so the whitened rows are
  // D^-1/2 L^-1 (Q' z) and log|H_c| = sum log D_i.
  double add_whitened_gram(double h2, const Eigen::Ref<const Eigen::MatrixXd>& working,
                           Eigen::MatrixXd& gram) const override {
    const Eigen::Index size = working.rows();
    Eigen::MatrixXd whitened = working;
    Eigen::VectorXd pivots(size);
    double log_det = 0.0;
    for (Eigen::Index row = 0; row < size; ++row) {
      double pivot = (1.0 - h2) + h2 * tridiagonal_.diagonal[row];
      if (row > 0) {
        const double coupling = h2 * tridiagonal_.off_diagonal[row - 1];
        const double multiplier = coupling / pivots[row - 1];
        pivot -= multiplier * coupling;
        whitened.row(row) -= multiplier * whitened.row(row - 1);
      }
      if (!(pivot > 0.0) || !std::isfinite(pivot)) return std::numeric_limits<double>::quiet_NaN();
      pivots[row] = pivot;
      log_det += std::log(pivot);
    }
    whitened = pivots.array().rsqrt().matrix().asDiagonal() * whitened;
    gram.noalias() += whitened.transpose() * whitened;
    return log_det;
  }

  void set_whitening(double h2) override {
    if (whiten_by_sparse_factor_) {
      whitening_ = make_sparse_whitening(component_, h2);
      return;
    }
    Eigen::MatrixXd h = dense_a();
    h *= h2;
    h.diagonal().array() += 1.0 - h2;
    whitening_ = std::make_unique<DenseWhitening>(component_.samples, std::move(h));
  }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    whitening_->whiten_block(genotypes, width, row_of_sample, scratch);
  }

 private:
  // A_c, lower triangle only.
  Eigen::MatrixXd dense_a() const {
    const auto size = static_cast<Eigen::Index>(component_.samples.size());
    Eigen::MatrixXd a = Eigen::MatrixXd::Zero(size, size);
    a.diagonal() = Eigen::Map<const Eigen::VectorXd>(component_.diagonal.data(), size);
    for (const Eigen::Triplet<double>& pair : component_.pairs) a(pair.row(), pair.col()) = pair.value();
    return a;
  }

  RelatedComponent component_;
  bool whiten_by_sparse_factor_;
  Tridiagonal tridiagonal_;
  std::unique_ptr<ComponentWhitening> whitening_;  // at the fixed h2
  AdmissibleRange range_;
};

}  // namespace

std::unique_ptr<CovarianceFactor> make_dense_component(RelatedComponent component, bool whiten_by_sparse_factor) {
  return std::make_unique<DenseComponent>(std::move(component), whiten_by_sparse_factor);
}

}  // namespace tamis::detail
