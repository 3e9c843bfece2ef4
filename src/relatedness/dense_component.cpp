// One connected component of A handled densely: reduced once to tridiagonal
// form for the likelihood at any h2, whitened by the dense Cholesky factor
// of H_c at the fixed h2.
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
#include <limits>

#include "relatedness/component_factor.hpp"
#include "tamis/errors.hpp"

namespace tamis::detail {
namespace {

// Columns reduced together before the trailing matrix is updated by one
// rank-2b product (level-3 work, in place of b rank-2 updates).
constexpr Eigen::Index kReductionPanel = 32;
// Rows of the whitened block computed together: each pass over a row of L
// serves this many rows of the block at once.
constexpr std::size_t kSolveRows = 4;

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
      product.noalias() = a.bottomRightCorner(below, below).selfadjointView<Eigen::Lower>() * reflector;
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

// x <- L^-1 x for the rows of a row-major block, L dense lower triangular
// with its rows packed one after another (row i holds i + 1 values). Each
// value is x_i = (b_i - L_i0 x_0 - L_i1 x_1 - ... ) / L_ii with the
// subtractions in that order, whatever the block's width or the column's
// place in it: a variant's values do not depend on its neighbours. The
// block's rows are taken kSolveRows at a time, so that each value of L read
// serves that many rows of every column.
void solve_packed_lower_in_place(const std::vector<double>& packed, std::size_t size, double* rows,
                                 std::size_t width) {
  std::vector<double> sums(kSolveRows * width);
  for (std::size_t first = 0; first < size; first += kSolveRows) {
    const std::size_t count = std::min(kSolveRows, size - first);
    std::copy(rows + first * width, rows + (first + count) * width, sums.begin());
    const double* l_rows[kSolveRows];
    for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
      l_rows[row_idx] = packed.data() + (first + row_idx) * (first + row_idx + 1) / 2;
    }
    if (count == kSolveRows) {
      for (std::size_t done = 0; done < first; ++done) {
        const double* solved = rows + done * width;
        const double l0 = l_rows[0][done], l1 = l_rows[1][done], l2 = l_rows[2][done], l3 = l_rows[3][done];
        double* s0 = sums.data();
        double* s1 = s0 + width;
        double* s2 = s1 + width;
        double* s3 = s2 + width;
        for (std::size_t col = 0; col < width; ++col) {
          s0[col] -= l0 * solved[col];
          s1[col] -= l1 * solved[col];
          s2[col] -= l2 * solved[col];
          s3[col] -= l3 * solved[col];
        }
      }
    } else {
      for (std::size_t done = 0; done < first; ++done) {
        const double* solved = rows + done * width;
        for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
          const double weight = l_rows[row_idx][done];
          double* sum = sums.data() + row_idx * width;
          for (std::size_t col = 0; col < width; ++col) sum[col] -= weight * solved[col];
        }
      }
    }
    // The rows of this group in turn: each one's earlier rows are solved.
    for (std::size_t row_idx = 0; row_idx < count; ++row_idx) {
      double* sum = sums.data() + row_idx * width;
      for (std::size_t done = first; done < first + row_idx; ++done) {
        const double weight = l_rows[row_idx][done];
        const double* solved = rows + done * width;
        for (std::size_t col = 0; col < width; ++col) sum[col] -= weight * solved[col];
      }
      const double pivot = l_rows[row_idx][first + row_idx];
      double* out = rows + (first + row_idx) * width;
      for (std::size_t col = 0; col < width; ++col) out[col] = sum[col] / pivot;
    }
  }
}

class DenseComponent final : public CovarianceFactor {
 public:
  explicit DenseComponent(RelatedComponent component) : component_(std::move(component)) {
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
    Eigen::MatrixXd h = h2 * dense_a();
    h.diagonal().array() += 1.0 - h2;
    Eigen::LLT<Eigen::Ref<Eigen::MatrixXd>> cholesky(h);
    if (cholesky.info() != Eigen::Success) {
      throw Error(ExitCode::internal, "mixed model", "H is not positive definite at the fitted h2");
    }
    const std::size_t size = component_.samples.size();
    packed_factor_.resize(size * (size + 1) / 2);
    for (std::size_t row = 0; row < size; ++row) {
      for (std::size_t col = 0; col <= row; ++col) {
        packed_factor_[row * (row + 1) / 2 + col] =
            h(static_cast<Eigen::Index>(row), static_cast<Eigen::Index>(col));
      }
    }
  }

  void whiten_block(double* genotypes, std::size_t width, const std::vector<std::size_t>& row_of_sample,
                    std::vector<double>& scratch) const override {
    const std::size_t size = component_.samples.size();
    scratch.resize(size * width);
    gather_rows(genotypes, width, row_of_sample, component_.samples.data(), size, scratch.data());
    solve_packed_lower_in_place(packed_factor_, size, scratch.data(), width);
    scatter_rows(scratch.data(), width, row_of_sample, component_.samples.data(), size, genotypes);
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
  Tridiagonal tridiagonal_;
  std::vector<double> packed_factor_;  // rows of H_c's Cholesky factor at the fixed h2
  AdmissibleRange range_;
};

}  // namespace

std::unique_ptr<CovarianceFactor> make_dense_component(RelatedComponent component) {
  return std::make_unique<DenseComponent>(std::move(component));
}

}  // namespace tamis::detail
