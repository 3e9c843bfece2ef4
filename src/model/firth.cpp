// Firth's penalised-likelihood logistic refit.
//
// With W^1/2 X_f = QR (thin Householder QR), everything the iteration needs
// comes from one factorisation: ln |I| = 2 sum ln |R_jj|, the hat diagonal
// h_i = |Q_i.|^2, and I^-1 = R^-1 R^-T. The null fit keeps the variant's
// coefficient at 0 and steps only the covariate coefficients, with the
// corresponding block of I, so that both fits maximise the same l*.
#include "tamis/firth.hpp"

#include <algorithm>
#include <cassert>
#include <cfloat>
#include <cmath>
#include <limits>

#include "logistic_fit.hpp"
#include "tamis/distributions.hpp"

namespace tamis {
namespace {

constexpr int kMaxIterations = 200;
constexpr int kMaxHalvings = 60;

// The fit's state at one coefficient vector.
struct PenalizedPoint {
  Eigen::VectorXd beta;
  Eigen::VectorXd mu;
  Eigen::VectorXd one_minus_mu;
  Eigen::MatrixXd q;  // thin Q of W^1/2 X_f
  Eigen::MatrixXd r;  // its R (upper triangular)
  double penalized_log_likelihood = -std::numeric_limits<double>::infinity();
};

// mu and 1 - mu, each computed directly; eta clamped to +-700 so that the
// weights stay normal numbers.
void split_probability(double eta, double* mu, double* one_minus_mu) {
  const double e = std::clamp(eta, -700.0, 700.0);
  const double t = std::exp(-std::fabs(e));
  const double large = 1.0 / (1.0 + t);
  const double small = t / (1.0 + t);
  *mu = e >= 0.0 ? large : small;
  *one_minus_mu = e >= 0.0 ? small : large;
}

PenalizedPoint evaluate_point(const Eigen::MatrixXd& design, const Eigen::VectorXd& y,
                              const Eigen::VectorXd& beta) {
  const Eigen::Index n = design.rows();
  const Eigen::Index k = design.cols();
  PenalizedPoint point;
  point.beta = beta;
  const Eigen::VectorXd eta = design * beta;
  point.mu.resize(n);
  point.one_minus_mu.resize(n);
  Eigen::VectorXd root_w(n);
  for (Eigen::Index sample_idx = 0; sample_idx < n; ++sample_idx) {
    split_probability(eta[sample_idx], &point.mu[sample_idx], &point.one_minus_mu[sample_idx]);
    root_w[sample_idx] = std::sqrt(point.mu[sample_idx] * point.one_minus_mu[sample_idx]);
  }
  const Eigen::MatrixXd weighted = root_w.asDiagonal() * design;
  const Eigen::HouseholderQR<Eigen::MatrixXd> qr(weighted);
  point.q = qr.householderQ() * Eigen::MatrixXd::Identity(n, k);
  point.r = qr.matrixQR().topRows(k);
  for (Eigen::Index col = 0; col < k; ++col) point.r.col(col).tail(k - col - 1).setZero();
  double log_det = 0.0;
  for (Eigen::Index col = 0; col < k; ++col) log_det += 2.0 * std::log(std::fabs(point.r(col, col)));
  const double log_likelihood = -0.5 * detail::logistic_deviance(y, eta);
  point.penalized_log_likelihood = log_likelihood + 0.5 * log_det;
  if (!std::isfinite(point.penalized_log_likelihood)) {
    point.penalized_log_likelihood = -std::numeric_limits<double>::infinity();
  }
  return point;
}

// The modified score X_f' (y - mu + h (1/2 - mu)).
Eigen::VectorXd modified_score(const Eigen::MatrixXd& design, const Eigen::VectorXd& y,
                               const PenalizedPoint& point) {
  const Eigen::Index n = design.rows();
  Eigen::VectorXd adjusted_residual(n);
  for (Eigen::Index sample_idx = 0; sample_idx < n; ++sample_idx) {
    const double residual = y[sample_idx] > 0.5 ? point.one_minus_mu[sample_idx] : -point.mu[sample_idx];
    const double leverage = point.q.row(sample_idx).squaredNorm();
    adjusted_residual[sample_idx] = residual + leverage * (0.5 - point.mu[sample_idx]);
  }
  return design.transpose() * adjusted_residual;
}

// The Newton step I_FF^-1 U*_F over the first `free_count` coefficients
// (the rest held fixed), zero-padded to the full length. I = R'R, and its
// leading block is R_FF' R_FF because R is upper triangular, so the step is
// one forward and one back substitution.
Eigen::VectorXd newton_step(const PenalizedPoint& point, const Eigen::VectorXd& score,
                            Eigen::Index free_count) {
  const Eigen::MatrixXd& r = point.r;
  Eigen::VectorXd step = Eigen::VectorXd::Zero(r.cols());
  Eigen::VectorXd forward(free_count);
  for (Eigen::Index row = 0; row < free_count; ++row) {  // R_FF' z = U*_F
    double sum = score[row];
    for (Eigen::Index col = 0; col < row; ++col) sum -= r(col, row) * forward[col];
    forward[row] = sum / r(row, row);
  }
  for (Eigen::Index row = free_count; row-- > 0;) {  // R_FF step = z
    double sum = forward[row];
    for (Eigen::Index col = row + 1; col < free_count; ++col) sum -= r(row, col) * step[col];
    step[row] = sum / r(row, row);
  }
  return step;
}

struct PenalizedFit {
  PenalizedPoint point;
  int iterations = 0;
  bool converged = false;
};

// Maximises l* over the first `free_count` coefficients starting at `start`.
PenalizedFit maximise_penalized(const Eigen::MatrixXd& design, const Eigen::VectorXd& y,
                                const Eigen::VectorXd& start, Eigen::Index free_count) {
  PenalizedFit fit;
  fit.point = evaluate_point(design, y, start);
  for (int iteration = 1; iteration <= kMaxIterations; ++iteration) {
    const Eigen::VectorXd score = modified_score(design, y, fit.point);
    Eigen::VectorXd step = newton_step(fit.point, score, free_count);
    if (!step.allFinite()) break;
    PenalizedPoint next = evaluate_point(design, y, fit.point.beta + step);
    const double current = fit.point.penalized_log_likelihood;
    const double slack = 1e-13 * (std::fabs(current) + 1.0);
    int halvings = 0;
    while (!(next.penalized_log_likelihood >= current - slack) && halvings < kMaxHalvings) {
      step *= 0.5;
      next = evaluate_point(design, y, fit.point.beta + step);
      ++halvings;
    }
    if (halvings == kMaxHalvings) break;  // no step raises l* any more
    const double max_step = step.cwiseAbs().maxCoeff();
    fit.point = std::move(next);
    fit.iterations = iteration;
    if (max_step < 1e-10 * (1.0 + fit.point.beta.cwiseAbs().maxCoeff())) {
      fit.converged = true;
      break;
    }
  }
  return fit;
}

bool in_covariate_span(const NullModel& model, const Eigen::MatrixXd& full_design) {
  const Eigen::Index p = model.design.cols();
  const Eigen::VectorXd root_w = model.weights.cwiseSqrt();
  const Eigen::MatrixXd weighted = root_w.asDiagonal() * full_design;
  const Eigen::HouseholderQR<Eigen::MatrixXd> qr(weighted);
  const double g_norm = weighted.col(p).norm();
  return !(std::fabs(qr.matrixQR()(p, p)) > 1e-9 * g_norm);
}

double finite_or_max(double value) { return std::isfinite(value) ? value : DBL_MAX; }

}  // namespace

FirthResult firth_refit(const NullModel& model, const Eigen::VectorXd& genotype) {
  assert(model.kind == TraitKind::binary);
  assert(genotype.size() == model.design.rows());
  FirthResult out;
  const Eigen::Index n = model.design.rows();
  const Eigen::Index p = model.design.cols();
  Eigen::MatrixXd full_design(n, p + 1);
  full_design.leftCols(p) = model.design;
  full_design.col(p) = genotype;
  if (in_covariate_span(model, full_design)) return out;  // not estimable: every statistic 0

  Eigen::VectorXd start(p + 1);
  start.head(p) = model.coefficients;
  start[p] = 0.0;
  const PenalizedFit null_fit = maximise_penalized(full_design, model.y, start, p);
  const PenalizedFit full_fit = maximise_penalized(full_design, model.y, start, p + 1);

  const double r_last = std::fabs(full_fit.point.r(p, p));
  out.beta = full_fit.point.beta[p];
  out.se = r_last > 0.0 ? finite_or_max(1.0 / r_last) : DBL_MAX;
  const double z = out.beta / out.se;
  out.wald_chisq = finite_or_max(z * z);
  out.wald_log_p = log_chisq1_upper_tail(out.wald_chisq);
  out.full_penalized_log_likelihood = full_fit.point.penalized_log_likelihood;
  out.null_penalized_log_likelihood = null_fit.point.penalized_log_likelihood;
  const double lrt = 2.0 * (out.full_penalized_log_likelihood - out.null_penalized_log_likelihood);
  out.lrt_chisq = std::isfinite(lrt) ? std::fmax(0.0, lrt) : 0.0;
  out.lrt_log_p = log_chisq1_upper_tail(out.lrt_chisq);
  out.iterations = null_fit.iterations + full_fit.iterations;
  out.converged = null_fit.converged && full_fit.converged && std::isfinite(lrt);
  if (!std::isfinite(out.full_penalized_log_likelihood)) out.full_penalized_log_likelihood = -DBL_MAX;
  if (!std::isfinite(out.null_penalized_log_likelihood)) out.null_penalized_log_likelihood = -DBL_MAX;
  return out;
}

}  // namespace tamis
