// Interaction score tests. Notation: Q the null model's orthonormal basis
// (of W^1/2 X), r the null residual, g~ and h~ = (g . E)~ the variant's
// columns with the covariates projected out.
//
// Linear traits, in tiles of eight variants (one lane each, every lane
// receiving the same operations in sample order, so a variant's result never
// depends on its neighbours): a first pass over the samples takes Q'g,
// Q'(g . E) and the plain sums, which give every model-based quantity
//   S = g~'g~, t = g~'h~, H = h~'h~, c-hat = g'r / S,
//   U = (g . E)'r - c-hat t            (the score of d at the fit of [X g])
//   A = H - t t' / S,  V_model = s^2 A (s^2 from the fit of [X g]);
// a second pass forms each sample's projections Q_s . (Q'g), Q_s . (Q'(g.E))
// (the per-variant projection) for the sandwich
//   V_robust = sum_s w_s e_s^2 a_s a_s',  e = r - c-hat g~,  a = h~ - g~ t / S,
// with w_s = 1 (HC0) or 1 / (1 - h_s)^2 (HC3; h_s the leverage of [X g]).
// The joint score of (c, d) is taken at the null fit: U = (g'r, (g.E)'r),
// V = s0^2 [g~ h~]'[g~ h~] or sum_s r_s^2 b_s b_s', b_s = (g~_s, h~_s).
// Both passes run over chunks of 32 samples held in L1, the projections
// register-blocked, compiled once per vector extension.
//
// Logistic traits, variant by variant: c is fitted by Newton steps along
// g~ (the profile over the covariates to first order) from the null fit;
// at that fit the score of d is made orthogonal to [X g] under its weights
// (Neyman's C(alpha) form), which keeps the test valid although the
// covariates' coefficients are not refitted.
#include "tamis/interaction_score.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstring>

#include "common/vector_clones.hpp"
#include "tamis/distributions.hpp"

namespace tamis {
namespace {

constexpr std::size_t kLanes = 8;

// What the linear passes read: the block, each analysis sample's row in it,
// and the per-sample values of the null model.
struct LinearTile {
  const double* genotypes;
  std::size_t width;
  const std::size_t* rows;
  std::size_t n;
  const double* basis;     // n x p
  const double* exposure;  // n x k
  const double* residual;
  const double* leverage;
  std::size_t p, k;
  bool hc3;
};

// The first pass's sums, kLanes values each, laid out one after another:
// g'g, g'r, Q'g (p), then per exposure column l: (g.E_l)'r, g'(g.E_l),
// Q'(g.E_l) (p), and (g.E_l)'(g.E_m) for m <= l.
std::size_t first_pass_size(std::size_t p, std::size_t k) { return 2 + p + k * (2 + p) + k * (k + 1) / 2; }
struct FirstPassSums {
  FirstPassSums(const double* sums, std::size_t p, std::size_t k) : sums_(sums), p_(p), k_(k) {}
  const double* gg() const { return sums_; }
  const double* gr() const { return sums_ + kLanes; }
  const double* qg(std::size_t c) const { return sums_ + (2 + c) * kLanes; }
  const double* ger(std::size_t l) const { return column(l); }
  const double* gge(std::size_t l) const { return column(l) + kLanes; }
  const double* qge(std::size_t l, std::size_t c) const { return column(l) + (2 + c) * kLanes; }
  const double* gege(std::size_t l, std::size_t m) const {
    return sums_ + (2 + p_ + k_ * (2 + p_) + l * (l + 1) / 2 + m) * kLanes;
  }

 private:
  const double* column(std::size_t l) const { return sums_ + (2 + p_ + l * (2 + p_)) * kLanes; }
  const double* sums_;
  std::size_t p_, k_;
};

// The second pass's sums: the main effect's sandwich, the interaction's
// (k x k, m <= l) and the joint score's ((k + 1) x (k + 1), i <= j).
std::size_t second_pass_size(std::size_t k) { return 1 + k * (k + 1) / 2 + (k + 1) * (k + 2) / 2; }
struct SecondPassSums {
  SecondPassSums(const double* sums, std::size_t k) : sums_(sums), k_(k) {}
  const double* main() const { return sums_; }
  const double* meat(std::size_t l, std::size_t m) const { return sums_ + (1 + l * (l + 1) / 2 + m) * kLanes; }
  const double* joint(std::size_t i, std::size_t j) const {
    return sums_ + (1 + k_ * (k_ + 1) / 2 + joint_index(i, j)) * kLanes;
  }

 private:
  // Upper triangle, row by row: (i, j), i <= j.
  std::size_t joint_index(std::size_t i, std::size_t j) const { return i * (2 * (k_ + 1) - i + 1) / 2 + (j - i); }
  const double* sums_;
  std::size_t k_;
};

// The fit of [X g] per lane, for the second pass.
struct SecondPassInputs {
  std::array<double, kLanes> s{}, c_hat{};
  std::vector<double> t_over_s;  // k x kLanes: g~'h~_l / g~'g~
};

// Samples per chunk of the passes: a chunk's dosages (and exposure
// products) stay in L1 while every projection column runs over them.
constexpr std::size_t kChunk = 32;

// Eight lanes of doubles as a GCC vector type: the compiler maps them onto
// whatever vector unit a clone targets, and every lane keeps its own sums.
typedef double Lanes __attribute__((vector_size(kLanes * sizeof(double))));

TAMIS_ALWAYS_INLINE Lanes load(const double* values) {
  Lanes lanes;
  std::memcpy(&lanes, values, sizeof lanes);
  return lanes;
}
TAMIS_ALWAYS_INLINE void store(double* values, Lanes lanes) { std::memcpy(values, &lanes, sizeof lanes); }
TAMIS_ALWAYS_INLINE void add_to(double* values, Lanes lanes) { store(values, load(values) + lanes); }

// The chunk's dosages, kLanes per sample (lanes past the block's end as 0).
TAMIS_ALWAYS_INLINE void load_chunk(const LinearTile& tile, std::size_t start, std::size_t samples, std::size_t first,
                                    std::size_t lanes, double* g) {
  for (std::size_t at = 0; at < samples; ++at) {
    const double* row = tile.genotypes + tile.rows[start + at] * tile.width + first;
    if (lanes == kLanes) {
      store(g + at * kLanes, load(row));
    } else {
      for (std::size_t lane = 0; lane < kLanes; ++lane) g[at * kLanes + lane] = lane < lanes ? row[lane] : 0.0;
    }
  }
}

// acc[c] += sum over the chunk's samples, in order, of q[s][c] v[s], four
// columns at a time so that the accumulators stay in registers.
TAMIS_ALWAYS_INLINE void project_chunk(const double* q, std::size_t p, const double* v, std::size_t samples,
                                       double* acc) {
  std::size_t c = 0;
  for (; c + 4 <= p; c += 4) {
    Lanes a0 = load(acc + c * kLanes), a1 = load(acc + (c + 1) * kLanes);
    Lanes a2 = load(acc + (c + 2) * kLanes), a3 = load(acc + (c + 3) * kLanes);
    for (std::size_t at = 0; at < samples; ++at) {
      const double* row = q + at * p + c;
      const Lanes values = load(v + at * kLanes);
      a0 += row[0] * values;
      a1 += row[1] * values;
      a2 += row[2] * values;
      a3 += row[3] * values;
    }
    store(acc + c * kLanes, a0);
    store(acc + (c + 1) * kLanes, a1);
    store(acc + (c + 2) * kLanes, a2);
    store(acc + (c + 3) * kLanes, a3);
  }
  for (; c < p; ++c) {
    Lanes a0 = load(acc + c * kLanes);
    for (std::size_t at = 0; at < samples; ++at) a0 += q[at * p + c] * load(v + at * kLanes);
    store(acc + c * kLanes, a0);
  }
}

// out[s] = v[s] - sum_c q[s][c] coef[c], the terms taken in column order,
// four samples at a time so that each coefficient is loaded once per four.
TAMIS_ALWAYS_INLINE void residualize_chunk(const double* q, std::size_t p, const double* v, const double* coef,
                                           std::size_t samples, double* out) {
  std::size_t at = 0;
  for (; at + 4 <= samples; at += 4) {
    Lanes r0 = load(v + at * kLanes), r1 = load(v + (at + 1) * kLanes);
    Lanes r2 = load(v + (at + 2) * kLanes), r3 = load(v + (at + 3) * kLanes);
    const double* q0 = q + at * p;
    for (std::size_t c = 0; c < p; ++c) {
      const Lanes column = load(coef + c * kLanes);
      r0 -= q0[c] * column;
      r1 -= q0[p + c] * column;
      r2 -= q0[2 * p + c] * column;
      r3 -= q0[3 * p + c] * column;
    }
    store(out + at * kLanes, r0);
    store(out + (at + 1) * kLanes, r1);
    store(out + (at + 2) * kLanes, r2);
    store(out + (at + 3) * kLanes, r3);
  }
  for (; at < samples; ++at) {
    Lanes r0 = load(v + at * kLanes);
    for (std::size_t c = 0; c < p; ++c) r0 -= q[at * p + c] * load(coef + c * kLanes);
    store(out + at * kLanes, r0);
  }
}

// The exposure products g . E_l of a chunk, column l at ge + l * kChunk * kLanes.
TAMIS_ALWAYS_INLINE void multiply_chunk(const LinearTile& tile, std::size_t start, std::size_t samples,
                                        const double* g, double* ge) {
  for (std::size_t l = 0; l < tile.k; ++l) {
    double* column = ge + l * kChunk * kLanes;
    for (std::size_t at = 0; at < samples; ++at) {
      store(column + at * kLanes, tile.exposure[(start + at) * tile.k + l] * load(g + at * kLanes));
    }
  }
}

// U' V^-1 U, or a negative value when V is not positive definite (relative
// pivot below 1e-12): the interaction is not estimable.
double quadratic_form(const Eigen::VectorXd& u, const Eigen::MatrixXd& v) {
  const Eigen::LDLT<Eigen::MatrixXd> ldlt(v);
  const double largest = v.diagonal().cwiseAbs().maxCoeff();
  if (ldlt.info() != Eigen::Success || !(ldlt.vectorD().minCoeff() > 1e-12 * largest)) return -1.0;
  return u.dot(ldlt.solve(u));
}

// The statistics of one variant once its score vectors and variances are in
// hand: U and A for d (k), the joint score and variance for (c, d) (k + 1).
// The joint score's variance comes model-based (joint_model_v) and robust
// (joint_robust_v, unused without robust errors).
void finish(const Eigen::VectorXd& u, const Eigen::MatrixXd& a, double model_scale, const Eigen::MatrixXd& robust,
            const Eigen::VectorXd& joint_u, const Eigen::MatrixXd& joint_model_v, const Eigen::MatrixXd& joint_robust_v,
            bool use_robust, InteractionScore& out) {
  const int k = static_cast<int>(u.size());
  const Eigen::MatrixXd model_v = model_scale * a;
  out.model_chisq = quadratic_form(u, model_v);
  const Eigen::MatrixXd& v = use_robust ? robust : model_v;
  out.chisq = use_robust ? quadratic_form(u, v) : out.model_chisq;
  const double joint_model_chisq = quadratic_form(joint_u, joint_model_v);
  const double joint_chisq = use_robust ? quadratic_form(joint_u, joint_robust_v) : joint_model_chisq;
  if (!(out.model_chisq >= 0.0) || !(out.chisq >= 0.0) || !(joint_chisq >= 0.0) || !(joint_model_chisq >= 0.0)) {
    out = InteractionScore{};
    out.testable = false;
    return;
  }
  out.model_log_p = log_chisq_upper_tail(out.model_chisq, k);
  out.log_p = log_chisq_upper_tail(out.chisq, k);
  out.joint_log_p = log_chisq_upper_tail(joint_chisq, k + 1);
  out.joint_model_log_p = log_chisq_upper_tail(joint_model_chisq, k + 1);
  // One-step d = A^-1 U, its covariance A^-1 V A^-1 (V / s^2 for the model's).
  const Eigen::LDLT<Eigen::MatrixXd> a_ldlt(a);
  const Eigen::VectorXd step = a_ldlt.solve(u);
  const Eigen::MatrixXd a_inverse = a_ldlt.solve(Eigen::MatrixXd::Identity(k, k));
  const Eigen::MatrixXd covariance = a_inverse * v * a_inverse;
  out.beta = step[0];
  out.se = std::sqrt(covariance(0, 0));
}

// First pass over the samples: every lane receives the same operations in
// sample order, so a variant's sums do not depend on its neighbours.
TAMIS_VECTOR_CLONES
void accumulate_first_pass(const LinearTile& tile, std::size_t first, std::size_t lanes, double* sums,
                           double* scratch) {
  const std::size_t p = tile.p, k = tile.k;
  double* qg = sums + 2 * kLanes;
  double* gege = sums + (2 + p + k * (2 + p)) * kLanes;
  double* g = scratch;
  double* ge = scratch + kChunk * kLanes;
  Lanes gg = load(sums), gr = load(sums + kLanes);
  for (std::size_t start = 0; start < tile.n; start += kChunk) {
    const std::size_t samples = std::min(kChunk, tile.n - start);
    load_chunk(tile, start, samples, first, lanes, g);
    multiply_chunk(tile, start, samples, g, ge);
    const double* q = tile.basis + start * p;
    for (std::size_t at = 0; at < samples; ++at) {
      const double r = tile.residual[start + at];
      const Lanes values = load(g + at * kLanes);
      gg += values * values;
      gr += values * r;
      std::size_t pair = 0;
      for (std::size_t l = 0; l < k; ++l) {
        const Lanes gel = load(ge + (l * kChunk + at) * kLanes);
        double* column = sums + (2 + p + l * (2 + p)) * kLanes;
        add_to(column, gel * r);
        add_to(column + kLanes, values * gel);
        for (std::size_t m = 0; m <= l; ++m, ++pair) {
          add_to(gege + pair * kLanes, gel * load(ge + (m * kChunk + at) * kLanes));
        }
      }
    }
    project_chunk(q, p, g, samples, qg);
    for (std::size_t l = 0; l < k; ++l) {
      project_chunk(q, p, ge + l * kChunk * kLanes, samples, sums + (2 + p + l * (2 + p) + 2) * kLanes);
    }
  }
  store(sums, gg);
  store(sums + kLanes, gr);
}

// Second pass: each sample's projections on the basis give g~ and h~, then
// the sandwich sums (see the file's comment).
TAMIS_VECTOR_CLONES
void accumulate_second_pass(const LinearTile& tile, std::size_t first, std::size_t lanes, const double* first_sums,
                            const SecondPassInputs& fitted, double* sums, double* scratch) {
  const std::size_t p = tile.p, k = tile.k;
  const double* qg = first_sums + 2 * kLanes;
  double* meat = sums + kLanes;
  double* joint = sums + (1 + k * (k + 1) / 2) * kLanes;
  double* g = scratch;
  double* ge = scratch + kChunk * kLanes;  // k columns, then overwritten by h~
  double* tilde_g = ge + k * kChunk * kLanes;
  double* adjusted_h = tilde_g + kChunk * kLanes;  // k columns
  const Lanes c_hat = load(fitted.c_hat.data()), s_value = load(fitted.s.data());
  Lanes main_meat = load(sums), joint_gg = load(joint);
  for (std::size_t start = 0; start < tile.n; start += kChunk) {
    const std::size_t samples = std::min(kChunk, tile.n - start);
    load_chunk(tile, start, samples, first, lanes, g);
    multiply_chunk(tile, start, samples, g, ge);
    const double* q = tile.basis + start * p;
    residualize_chunk(q, p, g, qg, samples, tilde_g);
    for (std::size_t l = 0; l < k; ++l) {
      double* column = ge + l * kChunk * kLanes;
      residualize_chunk(q, p, column, first_sums + (2 + p + l * (2 + p) + 2) * kLanes, samples, column);
      const Lanes ratio = load(fitted.t_over_s.data() + l * kLanes);
      double* adjusted = adjusted_h + l * kChunk * kLanes;
      for (std::size_t at = 0; at < samples; ++at) {
        store(adjusted + at * kLanes, load(column + at * kLanes) - ratio * load(tilde_g + at * kLanes));
      }
    }
    for (std::size_t at = 0; at < samples; ++at) {
      const std::size_t sample = start + at;
      const double r = tile.residual[sample];
      const Lanes tg = load(tilde_g + at * kLanes);
      const double null_room = 1.0 - tile.leverage[sample];
      const double null_weight = tile.hc3 ? (r * r) / (null_room * null_room) : r * r;
      const Lanes residual = r - c_hat * tg;
      Lanes weight = residual * residual;
      if (tile.hc3) {
        const Lanes room = null_room - tg * tg / s_value;
        weight /= room * room;
      }
      main_meat += weight * tg * tg;
      joint_gg += null_weight * tg * tg;
      std::size_t pair = 0;
      for (std::size_t l = 0; l < k; ++l) {
        const Lanes al = load(adjusted_h + (l * kChunk + at) * kLanes);
        const Lanes hl = load(ge + (l * kChunk + at) * kLanes);
        add_to(joint + (1 + l) * kLanes, null_weight * tg * hl);
        for (std::size_t m = 0; m <= l; ++m, ++pair) {
          add_to(meat + pair * kLanes, weight * al * load(adjusted_h + (m * kChunk + at) * kLanes));
        }
      }
      // The joint variance's lower-right block, (i, j) = (m + 1, l + 1), m <= l.
      for (std::size_t m = 0; m < k; ++m) {
        const Lanes hm = load(ge + (m * kChunk + at) * kLanes);
        for (std::size_t l = m; l < k; ++l) {
          const std::size_t index = (m + 1) * (2 * (k + 1) - (m + 1) + 1) / 2 + (l - m);
          add_to(joint + index * kLanes, null_weight * load(ge + (l * kChunk + at) * kLanes) * hm);
        }
      }
    }
  }
  store(sums, main_meat);
  store(joint, joint_gg);
}

}  // namespace

InteractionScoreKernel::InteractionScoreKernel(const NullModel& model, const Eigen::MatrixXd& exposure,
                                               const std::vector<std::size_t>& row_of_sample, RobustErrors robust)
    : model_(model), robust_(robust), k_(static_cast<std::size_t>(exposure.cols())),
      p_(static_cast<std::size_t>(model.basis.cols())) {
  const std::size_t n = static_cast<std::size_t>(model.sample_count());
  rows_ = row_of_sample;
  basis_.resize(n * p_);
  exposure_.resize(n * k_);
  residual_.resize(n);
  leverage_.resize(n);
  inverse_root_weight_.resize(n);
  for (std::size_t s = 0; s < n; ++s) {
    const Eigen::Index row = static_cast<Eigen::Index>(s);
    double leverage = 0.0;
    for (std::size_t c = 0; c < p_; ++c) {
      const double value = model.basis(row, static_cast<Eigen::Index>(c));
      basis_[s * p_ + c] = value;
      leverage += value * value;
    }
    for (std::size_t l = 0; l < k_; ++l) exposure_[s * k_ + l] = exposure(row, static_cast<Eigen::Index>(l));
    residual_[s] = model.residuals[row];
    leverage_[s] = leverage;
    inverse_root_weight_[s] = 1.0 / std::sqrt(model.weights[row]);
  }
  if (model.kind == TraitKind::binary) null_eta_ = model.design * model.coefficients;
}

void InteractionScoreKernel::compute(const double* genotypes, std::size_t width, InteractionScore* results) const {
  if (model_.kind == TraitKind::quantitative) {
    compute_linear(genotypes, width, results);
    return;
  }
  for (std::size_t variant = 0; variant < width; ++variant) {
    compute_logistic_variant(genotypes, width, variant, results[variant]);
  }
}

void InteractionScoreKernel::compute_linear(const double* genotypes, std::size_t width,
                                            InteractionScore* results) const {
  const std::size_t n = rows_.size();
  const std::size_t p = p_, k = k_;
  const bool use_robust = robust_ != RobustErrors::off;
  const LinearTile tile{genotypes, width, rows_.data(), n, basis_.data(), exposure_.data(), residual_.data(),
                        leverage_.data(), p, k, robust_ == RobustErrors::hc3};
  thread_local std::vector<double> first_sums, second_sums, chunk;
  chunk.resize((2 + 2 * k) * kChunk * kLanes);
  first_sums.resize(first_pass_size(p, k) * kLanes);
  second_sums.resize(second_pass_size(k) * kLanes);
  const double dof = static_cast<double>(n) - static_cast<double>(p) - 1.0;

  for (std::size_t first = 0; first < width; first += kLanes) {
    const std::size_t lanes = std::min(kLanes, width - first);
    std::fill(first_sums.begin(), first_sums.end(), 0.0);
    std::fill(second_sums.begin(), second_sums.end(), 0.0);
    accumulate_first_pass(tile, first, lanes, first_sums.data(), chunk.data());
    const FirstPassSums sums(first_sums.data(), p, k);
    // Model-based quantities per lane, and the fit of [X g] the second pass needs.
    SecondPassInputs fitted;
    std::array<bool, kLanes> usable{};
    std::vector<Eigen::VectorXd> u(kLanes);
    std::vector<Eigen::MatrixXd> a(kLanes), h_model(kLanes);
    std::array<double, kLanes> sigma2{};
    std::vector<double> t_values(k * kLanes, 0.0);
    fitted.s.fill(1.0);  // lanes without a usable variant keep harmless values
    fitted.c_hat.fill(0.0);
    fitted.t_over_s.assign(k * kLanes, 0.0);
    for (std::size_t lane = 0; lane < lanes; ++lane) {
      double projected = 0.0;
      for (std::size_t c = 0; c < p; ++c) projected += sums.qg(c)[lane] * sums.qg(c)[lane];
      const double s_value = sums.gg()[lane] - projected;
      usable[lane] = s_value > 1e-12 * sums.gg()[lane];
      if (!usable[lane]) continue;
      fitted.s[lane] = s_value;
      fitted.c_hat[lane] = sums.gr()[lane] / s_value;
      Eigen::VectorXd t(k);
      Eigen::MatrixXd h(k, k);
      u[lane].resize(k);
      for (std::size_t l = 0; l < k; ++l) {
        double cross = 0.0;
        for (std::size_t c = 0; c < p; ++c) cross += sums.qg(c)[lane] * sums.qge(l, c)[lane];
        t[l] = sums.gge(l)[lane] - cross;
        fitted.t_over_s[l * kLanes + lane] = t[l] / s_value;
        u[lane][l] = sums.ger(l)[lane] - fitted.c_hat[lane] * t[l];
        for (std::size_t m = 0; m <= l; ++m) {
          double both = 0.0;
          for (std::size_t c = 0; c < p; ++c) both += sums.qge(l, c)[lane] * sums.qge(m, c)[lane];
          h(l, m) = h(m, l) = sums.gege(l, m)[lane] - both;
        }
      }
      a[lane] = h - t * t.transpose() / s_value;
      h_model[lane] = h;
      for (std::size_t l = 0; l < k; ++l) t_values[l * kLanes + lane] = t[l];
      sigma2[lane] = (model_.rss - fitted.c_hat[lane] * sums.gr()[lane]) / dof;
    }
    if (use_robust) {
      accumulate_second_pass(tile, first, lanes, first_sums.data(), fitted, second_sums.data(), chunk.data());
    }
    const SecondPassSums robust_sums(second_sums.data(), k);
    for (std::size_t lane = 0; lane < lanes; ++lane) {
      InteractionScore& out = results[first + lane];
      out = InteractionScore{};
      if (!usable[lane]) {
        out.testable = false;
        continue;
      }
      Eigen::MatrixXd robust(k, k);
      Eigen::MatrixXd joint_v(k + 1, k + 1);
      if (use_robust) {
        for (std::size_t i = 0; i <= k; ++i) {
          for (std::size_t j = i; j <= k; ++j) joint_v(i, j) = joint_v(j, i) = robust_sums.joint(i, j)[lane];
        }
        for (std::size_t l = 0; l < k; ++l) {
          for (std::size_t m = 0; m <= l; ++m) robust(l, m) = robust(m, l) = robust_sums.meat(l, m)[lane];
        }
      }
      // The joint score's model-based variance under the null model.
      Eigen::MatrixXd joint_model_v(k + 1, k + 1);
      joint_model_v(0, 0) = fitted.s[lane];
      for (std::size_t l = 0; l < k; ++l) {
        joint_model_v(0, l + 1) = joint_model_v(l + 1, 0) = t_values[l * kLanes + lane];
        for (std::size_t m = 0; m < k; ++m) joint_model_v(l + 1, m + 1) = h_model[lane](l, m);
      }
      joint_model_v *= model_.sigma2;
      Eigen::VectorXd joint_u(k + 1);
      joint_u[0] = sums.gr()[lane];
      for (std::size_t l = 0; l < k; ++l) joint_u[l + 1] = sums.ger(l)[lane];
      finish(u[lane], a[lane], sigma2[lane], robust, joint_u, joint_model_v, joint_v, use_robust, out);
      if (!out.testable) continue;
      out.main_beta = fitted.c_hat[lane];
      out.main_se = use_robust ? std::sqrt(robust_sums.main()[lane]) / fitted.s[lane]
                               : std::sqrt(sigma2[lane] / fitted.s[lane]);
    }
  }
}

namespace {

// mu and mu (1 - mu) at the linear predictor, without overflow.
void logistic_mean(const Eigen::VectorXd& eta, Eigen::VectorXd& mu, Eigen::VectorXd& weights) {
  mu.resize(eta.size());
  weights.resize(eta.size());
  for (Eigen::Index s = 0; s < eta.size(); ++s) {
    const double e = std::clamp(eta[s], -700.0, 700.0);
    const double t = std::exp(-std::fabs(e));
    const double larger = 1.0 / (1.0 + t), smaller = t / (1.0 + t);
    mu[s] = e >= 0.0 ? larger : smaller;
    weights[s] = larger * smaller;
  }
}

}  // namespace

void InteractionScoreKernel::compute_logistic_variant(const double* genotypes, std::size_t width, std::size_t variant,
                                                      InteractionScore& out) const {
  out = InteractionScore{};
  const Eigen::Index n = static_cast<Eigen::Index>(rows_.size());
  const Eigen::Index p = static_cast<Eigen::Index>(p_), k = static_cast<Eigen::Index>(k_);
  const bool use_robust = robust_ != RobustErrors::off;
  const bool hc3 = robust_ == RobustErrors::hc3;
  Eigen::VectorXd g(n);
  for (Eigen::Index s = 0; s < n; ++s) g[s] = genotypes[rows_[static_cast<std::size_t>(s)] * width + variant];
  Eigen::MatrixXd h(n, k);
  for (Eigen::Index l = 0; l < k; ++l) {
    for (Eigen::Index s = 0; s < n; ++s) h(s, l) = g[s] * exposure_[static_cast<std::size_t>(s) * k_ + l];
  }
  // Columns less their weighted projection on X under the null weights:
  // v - W^-1/2 Q Q' W^1/2 v.
  const Eigen::Map<const Eigen::VectorXd> inverse_root_w(inverse_root_weight_.data(), n);
  const Eigen::VectorXd root_w = inverse_root_w.cwiseInverse();
  auto adjust = [&](const Eigen::MatrixXd& columns) -> Eigen::MatrixXd {
    const Eigen::MatrixXd weighted = root_w.asDiagonal() * columns;
    return inverse_root_w.asDiagonal() * (weighted - model_.basis * (model_.basis.transpose() * weighted));
  };
  const Eigen::VectorXd tilde_g = adjust(g);
  const Eigen::MatrixXd tilde_h = adjust(h);
  const Eigen::VectorXd& r = model_.residuals;
  const double s_null = tilde_g.cwiseProduct(model_.weights).dot(tilde_g);
  if (!(s_null > 1e-12 * g.cwiseProduct(model_.weights).dot(g))) {
    out.testable = false;
    return;
  }

  // c by Newton steps along g~ from the null fit.
  double main_beta = 0.0, information = s_null;
  Eigen::VectorXd mu = model_.fitted, weights = model_.weights;
  for (int step = 0; step < 6; ++step) {
    const double score = tilde_g.dot(model_.y - mu);
    const double change = std::clamp(score / information, -4.0, 4.0);
    main_beta += change;
    logistic_mean(null_eta_ + main_beta * tilde_g, mu, weights);
    information = tilde_g.cwiseProduct(weights).dot(tilde_g);
    if (std::fabs(change) < 1e-10 * (1.0 + std::fabs(main_beta))) break;
  }

  // The score of d at that fit, orthogonal to [X g] under its weights.
  Eigen::MatrixXd z(n, p + 1);
  z.leftCols(p) = model_.design;
  z.col(p) = g;
  const Eigen::VectorXd root_w1 = weights.cwiseSqrt();
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(root_w1.asDiagonal() * z);
  const Eigen::MatrixXd qz = qr.householderQ() * Eigen::MatrixXd::Identity(n, p + 1);
  const Eigen::MatrixXd weighted_h = root_w1.asDiagonal() * h;
  const Eigen::MatrixXd residual_h = weighted_h - qz * (qz.transpose() * weighted_h);
  const Eigen::MatrixXd efficient_h = root_w1.cwiseInverse().asDiagonal() * residual_h;
  const Eigen::VectorXd fit_residual = model_.y - mu;
  const Eigen::VectorXd u = efficient_h.transpose() * fit_residual;
  const Eigen::MatrixXd a = residual_h.transpose() * residual_h;

  Eigen::VectorXd omega = fit_residual.array().square();
  Eigen::VectorXd null_omega = r.array().square();
  if (hc3) {
    const Eigen::VectorXd leverage = qz.rowwise().squaredNorm();
    omega.array() /= (1.0 - leverage.array()).square();
    for (Eigen::Index s = 0; s < n; ++s) {
      const double room = 1.0 - leverage_[static_cast<std::size_t>(s)];
      null_omega[s] /= room * room;
    }
  }
  const Eigen::MatrixXd robust = efficient_h.transpose() * omega.asDiagonal() * efficient_h;

  Eigen::MatrixXd joint_columns(n, k + 1);
  joint_columns.col(0) = tilde_g;
  joint_columns.rightCols(k) = tilde_h;
  Eigen::VectorXd joint_u(k + 1);
  joint_u[0] = g.dot(r);
  joint_u.tail(k) = h.transpose() * r;
  const Eigen::MatrixXd joint_model_v = joint_columns.transpose() * model_.weights.asDiagonal() * joint_columns;
  const Eigen::MatrixXd joint_robust_v = joint_columns.transpose() * null_omega.asDiagonal() * joint_columns;
  finish(u, a, 1.0, robust, joint_u, joint_model_v, joint_robust_v, use_robust, out);
  if (!out.testable) return;
  out.main_beta = main_beta;
  out.main_se = use_robust ? std::sqrt(tilde_g.cwiseAbs2().dot(omega)) / information : 1.0 / std::sqrt(information);
}

}  // namespace tamis
