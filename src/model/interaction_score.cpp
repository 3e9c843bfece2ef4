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

#include "tamis/distributions.hpp"

namespace tamis {
namespace {

constexpr std::size_t kLanes = 8;

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
void finish(const Eigen::VectorXd& u, const Eigen::MatrixXd& a, double model_scale, const Eigen::MatrixXd& robust,
            const Eigen::VectorXd& joint_u, const Eigen::MatrixXd& joint_v, bool use_robust, InteractionScore& out) {
  const int k = static_cast<int>(u.size());
  const Eigen::MatrixXd model_v = model_scale * a;
  out.model_chisq = quadratic_form(u, model_v);
  const Eigen::MatrixXd& v = use_robust ? robust : model_v;
  out.chisq = use_robust ? quadratic_form(u, v) : out.model_chisq;
  const double joint_chisq = quadratic_form(joint_u, joint_v);
  if (!(out.model_chisq >= 0.0) || !(out.chisq >= 0.0) || !(joint_chisq >= 0.0)) {
    out = InteractionScore{};
    out.testable = false;
    return;
  }
  out.model_log_p = log_chisq_upper_tail(out.model_chisq, k);
  out.log_p = log_chisq_upper_tail(out.chisq, k);
  out.joint_log_p = log_chisq_upper_tail(joint_chisq, k + 1);
  // One-step d = A^-1 U, its covariance A^-1 V A^-1 (V / s^2 for the model's).
  const Eigen::LDLT<Eigen::MatrixXd> a_ldlt(a);
  const Eigen::VectorXd step = a_ldlt.solve(u);
  const Eigen::MatrixXd a_inverse = a_ldlt.solve(Eigen::MatrixXd::Identity(k, k));
  const Eigen::MatrixXd covariance = a_inverse * v * a_inverse;
  out.beta = step[0];
  out.se = std::sqrt(covariance(0, 0));
}

}  // namespace

InteractionScoreKernel::InteractionScoreKernel(const NullModel& model, const Eigen::MatrixXd& exposure,
                                               const std::vector<std::size_t>& row_of_sample, std::size_t row_count,
                                               RobustErrors robust)
    : model_(model), robust_(robust), k_(static_cast<std::size_t>(exposure.cols())),
      p_(static_cast<std::size_t>(model.basis.cols())) {
  (void)row_count;
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
  const bool hc3 = robust_ == RobustErrors::hc3;
  // Per lane: Q'g (p), Q'(g.E_l) (k x p), g'g, g'r, (g.E_l)'r (k), g'(g.E_l) (k), (g.E_l)'(g.E_m) (k x k).
  using Lane = std::array<double, kLanes>;
  std::vector<Lane> qg(p), qge(k * p), ger(k), gge(k), gege(k * k);
  // Second pass: the robust sums for d (k x k), c and (c, d) ((k + 1) x (k + 1)).
  std::vector<Lane> meat(k * k), joint_meat((k + 1) * (k + 1));
  std::vector<Lane> t_over_s(k);
  Lane gg, gr, main_meat, s_lane, c_hat;
  std::vector<double> ge(k * kLanes), tilde_h(k * kLanes);
  const double dof = static_cast<double>(n) - static_cast<double>(p) - 1.0;

  for (std::size_t first = 0; first < width; first += kLanes) {
    const std::size_t lanes = std::min(kLanes, width - first);
    auto load = [&](std::size_t s, Lane& g) {
      const double* row = genotypes + rows_[s] * width + first;
      for (std::size_t lane = 0; lane < kLanes; ++lane) g[lane] = lane < lanes ? row[lane] : 0.0;
    };
    for (auto* sums : {&qg, &qge, &ger, &gge, &gege, &meat, &joint_meat}) {
      for (Lane& lane : *sums) lane.fill(0.0);
    }
    gg.fill(0.0);
    gr.fill(0.0);
    main_meat.fill(0.0);
    Lane g;
    for (std::size_t s = 0; s < n; ++s) {
      load(s, g);
      const double* q = basis_.data() + s * p;
      const double* e = exposure_.data() + s * k;
      const double r = residual_[s];
      for (std::size_t lane = 0; lane < kLanes; ++lane) {
        gg[lane] += g[lane] * g[lane];
        gr[lane] += g[lane] * r;
      }
      for (std::size_t c = 0; c < p; ++c) {
        for (std::size_t lane = 0; lane < kLanes; ++lane) qg[c][lane] += q[c] * g[lane];
      }
      for (std::size_t l = 0; l < k; ++l) {
        double* gel = ge.data() + l * kLanes;
        for (std::size_t lane = 0; lane < kLanes; ++lane) gel[lane] = e[l] * g[lane];
        for (std::size_t lane = 0; lane < kLanes; ++lane) {
          ger[l][lane] += gel[lane] * r;
          gge[l][lane] += g[lane] * gel[lane];
        }
        for (std::size_t c = 0; c < p; ++c) {
          for (std::size_t lane = 0; lane < kLanes; ++lane) qge[l * p + c][lane] += q[c] * gel[lane];
        }
        for (std::size_t m = 0; m <= l; ++m) {
          const double* gem = ge.data() + m * kLanes;
          for (std::size_t lane = 0; lane < kLanes; ++lane) gege[l * k + m][lane] += gel[lane] * gem[lane];
        }
      }
    }
    // Model-based quantities per lane, and what the second pass needs.
    std::array<bool, kLanes> usable{};
    std::vector<Eigen::VectorXd> u(kLanes);
    std::vector<Eigen::MatrixXd> a(kLanes);
    std::array<double, kLanes> sigma2{};
    // Lanes without a usable variant keep harmless values for the second pass.
    s_lane.fill(1.0);
    c_hat.fill(0.0);
    for (Lane& ratio : t_over_s) ratio.fill(0.0);
    for (std::size_t lane = 0; lane < lanes; ++lane) {
      double projected = 0.0;
      for (std::size_t c = 0; c < p; ++c) projected += qg[c][lane] * qg[c][lane];
      const double s_value = gg[lane] - projected;
      usable[lane] = s_value > 1e-12 * gg[lane];
      if (!usable[lane]) continue;
      s_lane[lane] = s_value;
      c_hat[lane] = gr[lane] / s_value;
      Eigen::VectorXd t(k);
      Eigen::MatrixXd h(k, k);
      u[lane].resize(k);
      for (std::size_t l = 0; l < k; ++l) {
        double cross = 0.0;
        for (std::size_t c = 0; c < p; ++c) cross += qg[c][lane] * qge[l * p + c][lane];
        t[l] = gge[l][lane] - cross;
        t_over_s[l][lane] = t[l] / s_value;
        u[lane][l] = ger[l][lane] - c_hat[lane] * t[l];
        for (std::size_t m = 0; m <= l; ++m) {
          double both = 0.0;
          for (std::size_t c = 0; c < p; ++c) both += qge[l * p + c][lane] * qge[m * p + c][lane];
          h(l, m) = h(m, l) = gege[l * k + m][lane] - both;
        }
      }
      a[lane] = h - t * t.transpose() / s_value;
      sigma2[lane] = (model_.rss - c_hat[lane] * gr[lane]) / dof;
      // Joint model-based variance, kept in joint_meat until the robust one replaces it.
      if (!use_robust) {
        joint_meat[0][lane] = model_.sigma2 * s_value;
        for (std::size_t l = 0; l < k; ++l) {
          joint_meat[l + 1][lane] = model_.sigma2 * t[l];
          for (std::size_t m = 0; m < k; ++m) joint_meat[(l + 1) * (k + 1) + m + 1][lane] = model_.sigma2 * h(l, m);
        }
      }
    }
    if (use_robust) {
      Lane tilde_g;
      for (std::size_t s = 0; s < n; ++s) {
        load(s, g);
        const double* q = basis_.data() + s * p;
        const double* e = exposure_.data() + s * k;
        const double r = residual_[s];
        for (std::size_t lane = 0; lane < kLanes; ++lane) tilde_g[lane] = g[lane];
        for (std::size_t c = 0; c < p; ++c) {
          for (std::size_t lane = 0; lane < kLanes; ++lane) tilde_g[lane] -= q[c] * qg[c][lane];
        }
        for (std::size_t l = 0; l < k; ++l) {
          double* th = tilde_h.data() + l * kLanes;
          for (std::size_t lane = 0; lane < kLanes; ++lane) th[lane] = e[l] * g[lane];
          for (std::size_t c = 0; c < p; ++c) {
            for (std::size_t lane = 0; lane < kLanes; ++lane) th[lane] -= q[c] * qge[l * p + c][lane];
          }
        }
        const double null_scale = hc3 ? 1.0 / ((1.0 - leverage_[s]) * (1.0 - leverage_[s])) : 1.0;
        for (std::size_t lane = 0; lane < kLanes; ++lane) {
          const double residual = r - c_hat[lane] * tilde_g[lane];
          double weight = residual * residual;
          if (hc3) {
            const double room = 1.0 - leverage_[s] - tilde_g[lane] * tilde_g[lane] / s_lane[lane];
            weight /= room * room;
          }
          main_meat[lane] += weight * tilde_g[lane] * tilde_g[lane];
          const double null_weight = r * r * null_scale;
          joint_meat[0][lane] += null_weight * tilde_g[lane] * tilde_g[lane];
          for (std::size_t l = 0; l < k; ++l) {
            const double hl = tilde_h[l * kLanes + lane];
            const double al = hl - t_over_s[l][lane] * tilde_g[lane];
            joint_meat[l + 1][lane] += null_weight * tilde_g[lane] * hl;
            for (std::size_t m = 0; m <= l; ++m) {
              const double hm = tilde_h[m * kLanes + lane];
              const double am = hm - t_over_s[m][lane] * tilde_g[lane];
              meat[l * k + m][lane] += weight * al * am;
              joint_meat[(m + 1) * (k + 1) + l + 1][lane] += null_weight * hl * hm;
            }
          }
        }
      }
    }
    for (std::size_t lane = 0; lane < lanes; ++lane) {
      InteractionScore& out = results[first + lane];
      out = InteractionScore{};
      if (!usable[lane]) {
        out.testable = false;
        continue;
      }
      Eigen::MatrixXd robust(k, k);
      Eigen::MatrixXd joint_v(k + 1, k + 1);
      // joint_meat holds entry (i, j), i <= j, at i (k + 1) + j.
      for (std::size_t i = 0; i <= k; ++i) {
        for (std::size_t j = i; j <= k; ++j) joint_v(i, j) = joint_v(j, i) = joint_meat[i * (k + 1) + j][lane];
      }
      for (std::size_t l = 0; l < k; ++l) {
        for (std::size_t m = 0; m <= l; ++m) robust(l, m) = robust(m, l) = meat[l * k + m][lane];
      }
      Eigen::VectorXd joint_u(k + 1);
      joint_u[0] = gr[lane];
      for (std::size_t l = 0; l < k; ++l) joint_u[l + 1] = ger[l][lane];
      finish(u[lane], a[lane], sigma2[lane], robust, joint_u, joint_v, use_robust, out);
      if (!out.testable) continue;
      out.main_beta = c_hat[lane];
      out.main_se = use_robust ? std::sqrt(main_meat[lane]) / s_lane[lane] : std::sqrt(sigma2[lane] / s_lane[lane]);
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
  const Eigen::MatrixXd joint_v = use_robust
                                      ? Eigen::MatrixXd(joint_columns.transpose() * null_omega.asDiagonal() * joint_columns)
                                      : Eigen::MatrixXd(joint_columns.transpose() * model_.weights.asDiagonal() * joint_columns);
  finish(u, a, 1.0, robust, joint_u, joint_v, use_robust, out);
  if (!out.testable) return;
  out.main_beta = main_beta;
  out.main_se = use_robust ? std::sqrt(tilde_g.cwiseAbs2().dot(omega)) / information : 1.0 / std::sqrt(information);
}

}  // namespace tamis
