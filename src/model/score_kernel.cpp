// The blocked score test. One pass over the samples (in blocks that stay in
// cache) accumulates, for every variant j of the block,
//   P[c][j] = sum_s A[s][c] G[s][j]   (A = [W^1/2 Q, r], c = 0..p)
//   S[j]    = sum_s w_s G[s][j]^2
// with register-blocked loops vectorised across variants, while every variant
// still sees the same operations in the same order (one rounded multiply and
// one rounded add per sample, samples in order, -ffp-contract=off): results
// never depend on the block width or on a variant's position in the block.
#include "tamis/score_kernel.hpp"

#include <algorithm>
#include <cmath>

#include "tamis/distributions.hpp"

namespace tamis {
namespace {

// Samples per pass over the block: each pass streams that many genotype rows
// at once (few enough for the hardware prefetchers) while the accumulators of
// the whole block, (p + 1) x width, stay in cache.
constexpr std::size_t kSampleBlock = 32;

// acc[c][j] += a[s][c] * g[s][j] for C projection columns and J variants over
// `samples` consecutive samples, the accumulators held in registers. Each
// accumulator receives the same operations in sample order whatever C and J
// are, so every (C, J) instance gives bitwise the same values.
template <int C, int J>
inline void accumulate_projections(const double* a, std::size_t a_stride, const double* g,
                                   std::size_t g_stride, std::size_t samples, double* acc,
                                   std::size_t acc_stride) {
  double local[C][J];
  for (int c = 0; c < C; ++c)
    for (int j = 0; j < J; ++j) local[c][j] = acc[c * acc_stride + j];
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const double* g_row = g + sample_idx * g_stride;
    const double* a_row = a + sample_idx * a_stride;
    for (int c = 0; c < C; ++c) {
      const double a_value = a_row[c];
      for (int j = 0; j < J; ++j) local[c][j] += a_value * g_row[j];
    }
  }
  for (int c = 0; c < C; ++c)
    for (int j = 0; j < J; ++j) acc[c * acc_stride + j] = local[c][j];
}

template <int J>
inline void accumulate_projection_rows(const double* a, std::size_t rows, const double* g,
                                       std::size_t g_stride, std::size_t samples, double* acc,
                                       std::size_t acc_stride) {
  std::size_t c = 0;
  for (; c + 4 <= rows; c += 4) {
    accumulate_projections<4, J>(a + c, rows, g, g_stride, samples, acc + c * acc_stride, acc_stride);
  }
  switch (rows - c) {
    case 3: accumulate_projections<3, J>(a + c, rows, g, g_stride, samples, acc + c * acc_stride, acc_stride); break;
    case 2: accumulate_projections<2, J>(a + c, rows, g, g_stride, samples, acc + c * acc_stride, acc_stride); break;
    case 1: accumulate_projections<1, J>(a + c, rows, g, g_stride, samples, acc + c * acc_stride, acc_stride); break;
    default: break;
  }
}

// squares[j] += (w[s] g[s][j]) g[s][j] over `samples` consecutive samples.
template <int J>
inline void accumulate_squares(const double* w, const double* g, std::size_t g_stride,
                               std::size_t samples, double* squares) {
  double local[J];
  for (int j = 0; j < J; ++j) local[j] = squares[j];
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const double* g_row = g + sample_idx * g_stride;
    const double weight = w[sample_idx];
    for (int j = 0; j < J; ++j) local[j] += (weight * g_row[j]) * g_row[j];
  }
  for (int j = 0; j < J; ++j) squares[j] = local[j];
}

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

  if (scratch.projections.size() < rows * width) scratch.projections.resize(rows * width);
  if (scratch.weighted_squares.size() < width) scratch.weighted_squares.resize(width);
  double* proj = scratch.projections.data();  // proj[c * width + j]
  double* squares = scratch.weighted_squares.data();
  std::fill(proj, proj + rows * width, 0.0);
  std::fill(squares, squares + width, 0.0);

  for (std::size_t sample_start = 0; sample_start < n; sample_start += kSampleBlock) {
    const std::size_t samples = std::min(kSampleBlock, n - sample_start);
    const double* a = projection_rows_.data() + sample_start * rows;
    const double* w = weights + sample_start;
    const double* g_block = genotypes + sample_start * width;
    std::size_t j = 0;
    for (; j + 8 <= width; j += 8) {
      accumulate_projection_rows<8>(a, rows, g_block + j, width, samples, proj + j, width);
      accumulate_squares<8>(w, g_block + j, width, samples, squares + j);
    }
    for (; j < width; ++j) {
      accumulate_projection_rows<1>(a, rows, g_block + j, width, samples, proj + j, width);
      accumulate_squares<1>(w, g_block + j, width, samples, squares + j);
    }
  }

  for (std::size_t variant_idx = 0; variant_idx < width; ++variant_idx) {
    ScoreResult& out = results[variant_idx];
    const double total = squares[variant_idx];
    double projected = 0.0;
    for (std::size_t col_idx = 0; col_idx < p; ++col_idx) {
      const double value = proj[col_idx * width + variant_idx];
      projected += value * value;
    }
    const double v_raw = total - projected;
    out = ScoreResult{};
    out.u = proj[p * width + variant_idx];
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

}  // namespace tamis
