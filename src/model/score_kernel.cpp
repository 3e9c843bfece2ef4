// The blocked score test. One pass over the samples accumulates, for every
// variant j of the block,
//   P[c][j] = sum_s A[s][c] G[s][j]   (A = [W^1/2 Q, r], c = 0..p)
//   S[j]    = sum_s w_s G[s][j]^2
// with the inner loop over j, so the compiler vectorises across variants while
// every variant still sees the same operations in the same order (samples in
// order, -ffp-contract=off): results never depend on the block width or on a
// variant's position in the block.
#include "tamis/score_kernel.hpp"

#include <algorithm>
#include <cmath>

#include "tamis/distributions.hpp"

namespace tamis {
namespace {

// Columns of the block processed together, so the accumulators stay in L1.
constexpr std::size_t kTile = 64;

}  // namespace

ScoreKernel::ScoreKernel(const NullModel& model) : model_(model) {
  const std::size_t n = static_cast<std::size_t>(model.sample_count());
  const std::size_t p = static_cast<std::size_t>(model.basis.cols());
  projection_width_ = p + 1;
  projection_rows_.assign(n * projection_width_, 0.0);
  for (std::size_t s = 0; s < n; ++s) {
    const double root_w = std::sqrt(model.weights[static_cast<Eigen::Index>(s)]);
    double* row = projection_rows_.data() + s * projection_width_;
    for (std::size_t c = 0; c < p; ++c) {
      row[c] = root_w * model.basis(static_cast<Eigen::Index>(s), static_cast<Eigen::Index>(c));
    }
    row[p] = model.residuals[static_cast<Eigen::Index>(s)];
  }
}

void ScoreKernel::compute(const double* genotypes, std::size_t width, ScoreScratch& scratch,
                          ScoreResult* results) const {
  if (width == 0) return;
  const std::size_t n = static_cast<std::size_t>(model_.sample_count());
  const std::size_t rows = projection_width_;  // p + 1
  const std::size_t p = rows - 1;
  const double* weights = model_.weights.data();
  const bool linear = model_.kind == TraitKind::quantitative;
  const double sigma2 = model_.sigma2;

  if (scratch.projections.size() < rows * kTile) scratch.projections.resize(rows * kTile);
  if (scratch.weighted_squares.size() < kTile) scratch.weighted_squares.resize(kTile);
  double* proj = scratch.projections.data();
  double* squares = scratch.weighted_squares.data();

  for (std::size_t tile_start = 0; tile_start < width; tile_start += kTile) {
    const std::size_t tile = std::min(kTile, width - tile_start);
    std::fill(proj, proj + rows * kTile, 0.0);
    std::fill(squares, squares + kTile, 0.0);

    for (std::size_t sample_idx = 0; sample_idx < n; ++sample_idx) {
      const double* g = genotypes + sample_idx * width + tile_start;
      const double* a = projection_rows_.data() + sample_idx * rows;
      const double w = weights[sample_idx];
      for (std::size_t col_idx = 0; col_idx < rows; ++col_idx) {
        const double a_value = a[col_idx];
        double* acc = proj + col_idx * kTile;
        for (std::size_t variant_idx = 0; variant_idx < tile; ++variant_idx) {
          acc[variant_idx] += a_value * g[variant_idx];
        }
      }
      for (std::size_t variant_idx = 0; variant_idx < tile; ++variant_idx) {
        const double value = g[variant_idx];
        squares[variant_idx] += (w * value) * value;
      }
    }

    for (std::size_t variant_idx = 0; variant_idx < tile; ++variant_idx) {
      ScoreResult& out = results[tile_start + variant_idx];
      const double total = squares[variant_idx];
      double projected = 0.0;
      for (std::size_t col_idx = 0; col_idx < p; ++col_idx) {
        const double value = proj[col_idx * kTile + variant_idx];
        projected += value * value;
      }
      const double v_raw = total - projected;
      out = ScoreResult{};
      out.u = proj[p * kTile + variant_idx];
      if (!(v_raw > 1e-12 * total)) {
        // The variant lies in the covariate span (or is all zero): nothing to test.
        out.v = 0.0;
        out.testable = false;
        continue;
      }
      // V' = V / sigma^2 = V_raw for linear models; V' = V for logistic ones.
      out.v = linear ? sigma2 * v_raw : v_raw;
      out.chisq = out.u * out.u / out.v;
      out.log_p = log_chisq1_upper_tail(out.chisq);
      out.beta = out.u / v_raw;
      // SE of the one-step estimate: sqrt(sigma^2 / V') (linear), 1 / sqrt(V') (logistic),
      // so that (beta / se)^2 equals the score statistic in both cases.
      out.se = linear ? std::sqrt(sigma2 / v_raw) : 1.0 / std::sqrt(v_raw);
    }
  }
}

}  // namespace tamis
