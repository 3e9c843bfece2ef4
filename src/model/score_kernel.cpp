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
#include <cstdlib>
#include <cstring>
#include <string>

#include "common/vector_clones.hpp"
#include "tamis/distributions.hpp"

namespace tamis {
namespace {

// Samples per pass over the block: each pass streams that many genotype rows
// at once (few enough for the hardware prefetchers) while the accumulators of
// the whole block, (p + 1) x width, stay in cache.
constexpr std::size_t kSampleBlock = 32;

// Vectors of 2, 4 and 8 doubles as GCC and clang vector types. The loops
// below are written with them explicitly rather than left to the
// auto-vectoriser, which at -O3 was seen to load one row past the block.
typedef double Vector2 __attribute__((vector_size(2 * sizeof(double))));
typedef double Vector4 __attribute__((vector_size(4 * sizeof(double))));
typedef double Vector8 __attribute__((vector_size(8 * sizeof(double))));

template <typename V>
TAMIS_ALWAYS_INLINE V load_vector(const double* values) {
  V vector;
  std::memcpy(&vector, values, sizeof vector);
  return vector;
}
template <typename V>
TAMIS_ALWAYS_INLINE void store_vector(double* values, V vector) {
  std::memcpy(values, &vector, sizeof vector);
}

// acc[c][j] += a[s][c] * g[s][j] for C projection columns and G vectors of
// variants over `samples` consecutive samples, the accumulators held in
// registers. Each lane of each accumulator receives the same operations in
// sample order whatever V, C and G are, so every instance gives bitwise the
// same values.
template <typename V, int C, int G>
TAMIS_ALWAYS_INLINE void accumulate_projections(const double* a, std::size_t a_stride, const double* g,
                                                std::size_t g_stride, std::size_t samples, double* acc,
                                                std::size_t acc_stride) {
  constexpr int kLanes = sizeof(V) / sizeof(double);
  V local[C][G];
  for (int c = 0; c < C; ++c)
    for (int k = 0; k < G; ++k) local[c][k] = load_vector<V>(acc + c * acc_stride + k * kLanes);
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const double* g_row = g + sample_idx * g_stride;
    const double* a_row = a + sample_idx * a_stride;
    V genotype[G];
    for (int k = 0; k < G; ++k) genotype[k] = load_vector<V>(g_row + k * kLanes);
    for (int c = 0; c < C; ++c) {
      const double a_value = a_row[c];
      for (int k = 0; k < G; ++k) local[c][k] += a_value * genotype[k];
    }
  }
  for (int c = 0; c < C; ++c)
    for (int k = 0; k < G; ++k) store_vector(acc + c * acc_stride + k * kLanes, local[c][k]);
}

// The same for one variant, one projection at a time: plain scalar code.
TAMIS_ALWAYS_INLINE void accumulate_projection_of_one(const double* a, std::size_t a_stride, const double* g,
                                                      std::size_t g_stride, std::size_t samples, double* acc) {
  double local = *acc;
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    local += a[sample_idx * a_stride] * g[sample_idx * g_stride];
  }
  *acc = local;
}

// squares[j] += (w[s] g[s][j]) g[s][j] over `samples` consecutive samples.
template <typename V, int G>
TAMIS_ALWAYS_INLINE void accumulate_squares(const double* w, const double* g, std::size_t g_stride,
                                            std::size_t samples, double* squares) {
  constexpr int kLanes = sizeof(V) / sizeof(double);
  V local[G];
  for (int k = 0; k < G; ++k) local[k] = load_vector<V>(squares + k * kLanes);
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const double* g_row = g + sample_idx * g_stride;
    const double weight = w[sample_idx];
    for (int k = 0; k < G; ++k) {
      const V genotype = load_vector<V>(g_row + k * kLanes);
      local[k] += (weight * genotype) * genotype;
    }
  }
  for (int k = 0; k < G; ++k) store_vector(squares + k * kLanes, local[k]);
}

TAMIS_ALWAYS_INLINE void accumulate_square_of_one(const double* w, const double* g, std::size_t g_stride,
                                                  std::size_t samples, double* square) {
  double local = *square;
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const double genotype = g[sample_idx * g_stride];
    local += (w[sample_idx] * genotype) * genotype;
  }
  *square = local;
}

// G vectors of variants against every projection row, C rows at a time.
template <typename V, int C, int G>
TAMIS_ALWAYS_INLINE void accumulate_variant_group(const double* a, std::size_t rows, const double* w,
                                                  const double* g, std::size_t width, std::size_t samples,
                                                  double* proj, double* squares) {
  std::size_t c = 0;
  for (; c + C <= rows; c += C) {
    accumulate_projections<V, C, G>(a + c, rows, g, width, samples, proj + c * width, width);
  }
  for (; c < rows; ++c) accumulate_projections<V, 1, G>(a + c, rows, g, width, samples, proj + c * width, width);
  accumulate_squares<V, G>(w, g, width, samples, squares);
}

// The whole accumulation for one register blocking: G vectors of V (J
// variants) at a time, the projections C at a time; then single vectors, and
// the last few variants one by one.
template <typename V, int C, int G>
TAMIS_ALWAYS_INLINE void accumulate_all(const double* projection_rows, std::size_t rows, const double* weights,
                                        const double* genotypes, std::size_t n, std::size_t width, double* proj,
                                        double* squares) {
  constexpr std::size_t kLanes = sizeof(V) / sizeof(double);
  constexpr std::size_t kGroup = kLanes * G;
  for (std::size_t sample_start = 0; sample_start < n; sample_start += kSampleBlock) {
    const std::size_t samples = std::min(kSampleBlock, n - sample_start);
    const double* a = projection_rows + sample_start * rows;
    const double* w = weights + sample_start;
    const double* g_block = genotypes + sample_start * width;
    std::size_t j = 0;
    for (; j + kGroup <= width; j += kGroup) {
      accumulate_variant_group<V, C, G>(a, rows, w, g_block + j, width, samples, proj + j, squares + j);
    }
    for (; j + kLanes <= width; j += kLanes) {
      accumulate_variant_group<V, C, 1>(a, rows, w, g_block + j, width, samples, proj + j, squares + j);
    }
    for (; j < width; ++j) {
      for (std::size_t c = 0; c < rows; ++c) {
        accumulate_projection_of_one(a + c, rows, g_block + j, width, samples, proj + c * width + j);
      }
      accumulate_square_of_one(w, g_block + j, width, samples, squares + j);
    }
  }
}

using AccumulateFunction = void (*)(const double*, std::size_t, const double*, const double*, std::size_t,
                                    std::size_t, double*, double*);

// One blocking per instruction set, each sized to its registers (8
// accumulators: SSE2 has 16 registers of 2 doubles, AVX2 16 of 4, AVX-512 32
// of 8). Lanes hold different variants and contraction is off, so every
// variant receives the same rounded multiplies and adds in the same order
// whatever the blocking or the vector width: results are bitwise the same on
// every machine (shards of one scan may run on different cluster nodes).
void accumulate_baseline(const double* a, std::size_t rows, const double* w, const double* g, std::size_t n,
                         std::size_t width, double* proj, double* squares) {
  accumulate_all<Vector2, 2, 4>(a, rows, w, g, n, width, proj, squares);
}

#if TAMIS_HAVE_VECTOR_CLONES
__attribute__((target("avx2"))) void accumulate_avx2(const double* a, std::size_t rows, const double* w,
                                                     const double* g, std::size_t n, std::size_t width,
                                                     double* proj, double* squares) {
  accumulate_all<Vector4, 2, 4>(a, rows, w, g, n, width, proj, squares);
}

__attribute__((target("avx512f"))) void accumulate_avx512(const double* a, std::size_t rows, const double* w,
                                                          const double* g, std::size_t n, std::size_t width,
                                                          double* proj, double* squares) {
  accumulate_all<Vector8, 4, 2>(a, rows, w, g, n, width, proj, squares);
}
#endif

// The widest blocking the machine runs. TAMIS_KERNEL_ISA (baseline, avx2)
// asks for a narrower one: the tests use it to show that all give the same
// bits.
AccumulateFunction choose_accumulate() {
  const char* requested = std::getenv("TAMIS_KERNEL_ISA");
  const std::string isa = requested ? requested : "";
  if (isa == "baseline") return accumulate_baseline;
#if TAMIS_HAVE_VECTOR_CLONES
  __builtin_cpu_init();
  if (isa != "avx2" && __builtin_cpu_supports("avx512f")) return accumulate_avx512;
  if (__builtin_cpu_supports("avx2")) return accumulate_avx2;
#endif
  return accumulate_baseline;
}

const AccumulateFunction accumulate_for_this_machine = choose_accumulate();

}  // namespace

namespace {

std::vector<std::size_t> rows_in_order(std::size_t count) {
  std::vector<std::size_t> rows(count);
  for (std::size_t row = 0; row < count; ++row) rows[row] = row;
  return rows;
}

}  // namespace

ScoreKernel::ScoreKernel(const NullModel& model)
    : ScoreKernel(model, rows_in_order(static_cast<std::size_t>(model.sample_count())),
                  static_cast<std::size_t>(model.sample_count())) {}

ScoreKernel::ScoreKernel(const NullModel& model, const std::vector<std::size_t>& row_of_sample, std::size_t row_count)
    : model_(model), row_count_(row_count) {
  const std::size_t n = static_cast<std::size_t>(model.sample_count());
  const std::size_t p = static_cast<std::size_t>(model.basis.cols());
  projection_width_ = p + 1;
  projection_rows_.assign(row_count * projection_width_, 0.0);
  weights_.assign(row_count, 0.0);
  for (std::size_t s = 0; s < n; ++s) {
    const double weight = model.weights[static_cast<Eigen::Index>(s)];
    const double root_w = std::sqrt(weight);
    double* row = projection_rows_.data() + row_of_sample[s] * projection_width_;
    for (std::size_t c = 0; c < p; ++c) {
      row[c] = root_w * model.basis(static_cast<Eigen::Index>(s), static_cast<Eigen::Index>(c));
    }
    row[p] = model.residuals[static_cast<Eigen::Index>(s)];
    weights_[row_of_sample[s]] = weight;
  }
}

// Each listed dosage counts as if the block held its imputed value: its
// row's terms, times that value, join the sums.
void ScoreKernel::add_imputed(const ImputedDosages& imputed, std::size_t width, double* proj,
                              double* squares) const {
  const std::size_t rows = projection_width_;
  for (std::size_t variant_idx = 0; variant_idx < width; ++variant_idx) {
    const double fill = imputed.fills[variant_idx];
    for (std::size_t at = imputed.starts[variant_idx]; at < imputed.starts[variant_idx + 1]; ++at) {
      const std::size_t row = imputed.rows[at];
      const double* a = projection_rows_.data() + row * rows;
      for (std::size_t c = 0; c < rows; ++c) proj[c * width + variant_idx] += a[c] * fill;
      squares[variant_idx] += (weights_[row] * fill) * fill;
    }
  }
}

void ScoreKernel::compute(const double* genotypes, std::size_t width, ScoreScratch& scratch,
                          ScoreResult* results, const ImputedDosages* imputed) const {
  if (width == 0) return;
  const std::size_t n = row_count_;
  const std::size_t rows = projection_width_;  // p + 1
  const std::size_t p = rows - 1;
  const double* weights = weights_.data();
  const bool linear = model_.kind == TraitKind::quantitative;
  const double sigma2 = model_.sigma2;

  if (scratch.projections.size() < rows * width) scratch.projections.resize(rows * width);
  if (scratch.weighted_squares.size() < width) scratch.weighted_squares.resize(width);
  double* proj = scratch.projections.data();  // proj[c * width + j]
  double* squares = scratch.weighted_squares.data();
  std::fill(proj, proj + rows * width, 0.0);
  std::fill(squares, squares + width, 0.0);

  accumulate_for_this_machine(projection_rows_.data(), rows, weights, genotypes, n, width, proj, squares);
  if (imputed) add_imputed(*imputed, width, proj, squares);

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
