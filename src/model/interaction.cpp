// Interaction refits of [X g g.E]. Every variance comes from one QR of the
// (weighted) full design, W^1/2 Z = Q R: the variant's coefficients are the
// last m = k + 1, and since R is upper triangular the last m rows of R^-1
// are [0, R22^-1], so their covariance is R22^-1 M R22^-T with
//   M = s^2 I                 (model-based; s^2 = RSS / df linear, 1 logistic)
//   M = Q2' diag(d) Q2        (sandwich: Z' diag(e^2) Z in the QR's terms)
// where Q2 holds Q's last m columns and d_i = e_i^2 / w_i (w = 1 linear,
// mu (1 - mu) logistic), divided by (1 - h_i)^2 for HC3 with the leverage
// h_i = |Q_i|^2 of the (weighted) hat matrix.
#include "tamis/interaction.hpp"

#include <cfloat>
#include <cmath>

#include "logistic_fit.hpp"
#include "tamis/distributions.hpp"

namespace tamis {
namespace {

Eigen::MatrixXd interaction_design(const NullModel& model, const Eigen::MatrixXd& exposure,
                                   const Eigen::VectorXd& genotype) {
  const Eigen::Index p = model.design.cols();
  const Eigen::Index k = exposure.cols();
  Eigen::MatrixXd z(model.design.rows(), p + 1 + k);
  z.leftCols(p) = model.design;
  z.col(p) = genotype;
  for (Eigen::Index col = 0; col < k; ++col) z.col(p + 1 + col) = genotype.cwiseProduct(exposure.col(col));
  return z;
}

struct ThinQr {
  Eigen::MatrixXd q;  // n x columns
  Eigen::MatrixXd r;  // columns x columns, upper triangular
};

ThinQr thin_qr(const Eigen::MatrixXd& z) {
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(z);
  ThinQr out;
  out.q = qr.householderQ() * Eigen::MatrixXd::Identity(z.rows(), z.cols());
  out.r = qr.matrixQR().topRows(z.cols()).triangularView<Eigen::Upper>();
  return out;
}

// True when each of the last `tail` columns keeps more than 1e-9 of its norm
// outside the span of the columns before it (the QR's diagonal).
bool tail_estimable(const ThinQr& qr, const Eigen::MatrixXd& z, Eigen::Index tail) {
  for (Eigen::Index col = z.cols() - tail; col < z.cols(); ++col) {
    if (!(std::fabs(qr.r(col, col)) > 1e-9 * z.col(col).norm())) return false;
  }
  return true;
}

// The covariance of the last m coefficients: R22^-1 M R22^-T.
Eigen::MatrixXd tail_covariance(const ThinQr& qr, Eigen::Index m, const Eigen::MatrixXd& middle) {
  const Eigen::MatrixXd r22 = qr.r.bottomRightCorner(m, m);
  const Eigen::MatrixXd left =
      r22.triangularView<Eigen::Upper>().solve(Eigen::MatrixXd::Identity(m, m));  // R22^-1
  return left * middle * left.transpose();
}

// M of the sandwich: Q2' diag(d) Q2 with d_i = e_i^2 / w_i, over (1 - h_i)^2 for HC3.
Eigen::MatrixXd sandwich_middle(const ThinQr& qr, Eigen::Index m, const Eigen::VectorXd& residuals,
                                const Eigen::VectorXd& weights, RobustErrors robust) {
  Eigen::VectorXd d = residuals.array().square() / weights.array();
  if (robust == RobustErrors::hc3) {
    const Eigen::VectorXd leverage = qr.q.rowwise().squaredNorm();
    // A leverage of 1 (a sample that fixes its own fit) leaves the HC3
    // weight unbounded; DBL_EPSILON keeps it finite and enormous.
    d.array() /= (1.0 - leverage.array()).max(DBL_EPSILON).square();
  }
  const Eigen::MatrixXd q2 = qr.q.rightCols(m);
  return q2.transpose() * d.asDiagonal() * q2;
}

double quadratic_form_inverse(const Eigen::VectorXd& b, const Eigen::MatrixXd& covariance) {
  const Eigen::LDLT<Eigen::MatrixXd> ldlt(covariance);
  return b.dot(ldlt.solve(b));
}

// Wald tests of the interaction (the last k of the m = k + 1 tail
// coefficients) and of the whole tail, from one covariance of the tail.
// `residual_df` > 0 selects t / F (linear), 0 chi-square (logistic).
void wald_tests(const Eigen::VectorXd& tail_beta, const Eigen::MatrixXd& covariance, double residual_df,
                InteractionTest& interaction, InteractionTest& joint) {
  const Eigen::Index m = tail_beta.size();
  const Eigen::Index k = m - 1;
  interaction.df = static_cast<int>(k);
  joint.df = static_cast<int>(m);
  interaction.statistic = quadratic_form_inverse(tail_beta.tail(k), covariance.bottomRightCorner(k, k));
  joint.statistic = quadratic_form_inverse(tail_beta, covariance);
  if (residual_df > 0.0) {
    interaction.log_p = k == 1 ? log_student_t_two_sided(tail_beta[1] / std::sqrt(covariance(1, 1)), residual_df)
                               : log_f_upper_tail(interaction.statistic / k, static_cast<double>(k), residual_df);
    joint.log_p = log_f_upper_tail(joint.statistic / m, static_cast<double>(m), residual_df);
  } else {
    interaction.log_p = log_chisq_upper_tail(interaction.statistic, interaction.df);
    joint.log_p = log_chisq_upper_tail(joint.statistic, joint.df);
  }
}

InteractionTest lr_test(double statistic, Eigen::Index df) {
  InteractionTest test;
  test.statistic = std::fmax(0.0, statistic);
  test.df = static_cast<int>(df);
  test.log_p = log_chisq_upper_tail(test.statistic, test.df);
  return test;
}

// Coefficients, SEs and Wald tests from the fitted tail and its QR.
void fill_wald(const ThinQr& qr, const Eigen::VectorXd& tail_beta, double model_scale, double residual_df,
               const Eigen::VectorXd& residuals, const Eigen::VectorXd& weights, RobustErrors robust,
               InteractionFit& fit) {
  const Eigen::Index m = tail_beta.size();
  const Eigen::Index k = m - 1;
  const Eigen::MatrixXd model_cov = tail_covariance(qr, m, model_scale * Eigen::MatrixXd::Identity(m, m));
  wald_tests(tail_beta, model_cov, residual_df, fit.interaction_model, fit.joint_model);
  Eigen::MatrixXd robust_cov = model_cov;
  if (robust == RobustErrors::off) {
    fit.interaction_robust = fit.interaction_model;
    fit.joint_robust = fit.joint_model;
  } else {
    robust_cov = tail_covariance(qr, m, sandwich_middle(qr, m, residuals, weights, robust));
    wald_tests(tail_beta, robust_cov, residual_df, fit.interaction_robust, fit.joint_robust);
  }
  fit.main_beta = tail_beta[0];
  fit.main_model_se = std::sqrt(model_cov(0, 0));
  fit.main_se = std::sqrt(robust_cov(0, 0));
  fit.interaction_beta = tail_beta.tail(k);
  fit.interaction_model_se = model_cov.diagonal().tail(k).cwiseSqrt();
  fit.interaction_se = robust_cov.diagonal().tail(k).cwiseSqrt();
}

InteractionFit not_estimable(Eigen::Index k) {
  InteractionFit fit;
  fit.converged = false;
  fit.estimable = false;
  fit.interaction_beta = fit.interaction_se = fit.interaction_model_se = Eigen::VectorXd::Zero(k);
  for (InteractionTest* test : {&fit.interaction_robust, &fit.interaction_model, &fit.interaction_lr}) {
    test->df = static_cast<int>(k);
  }
  for (InteractionTest* test : {&fit.joint_robust, &fit.joint_model, &fit.joint_lr}) test->df = static_cast<int>(k + 1);
  return fit;
}

InteractionFit fit_linear(const NullModel& model, const Eigen::MatrixXd& z, Eigen::Index k, RobustErrors robust) {
  const Eigen::Index n = z.rows();
  const Eigen::Index p = model.design.cols();
  const Eigen::Index m = k + 1;
  const ThinQr qr = thin_qr(z);
  const double residual_df = static_cast<double>(n - p - m);
  if (!(residual_df > 0.0) || !tail_estimable(qr, z, m)) return not_estimable(k);
  const Eigen::VectorXd qty = qr.q.transpose() * model.y;
  const Eigen::VectorXd b = qr.r.triangularView<Eigen::Upper>().solve(qty);
  const Eigen::VectorXd residuals = model.y - z * b;
  const double rss = std::fmax(residuals.squaredNorm(), DBL_MIN);

  InteractionFit fit;
  fill_wald(qr, b.tail(m), rss / residual_df, residual_df, residuals, Eigen::VectorXd::Ones(n), robust, fit);
  // RSS of a leading set of columns exceeds the full RSS by the squares of
  // the remaining components of Q'y: the drops are taken directly, so that
  // small effects keep their digits.
  const double interaction_drop = qty.tail(k).squaredNorm();
  const double joint_drop = qty.tail(m).squaredNorm();
  fit.interaction_lr = lr_test(static_cast<double>(n) * std::log1p(interaction_drop / rss), k);
  fit.joint_lr = lr_test(static_cast<double>(n) * std::log1p(joint_drop / rss), m);
  return fit;
}

InteractionFit fit_logistic_interaction(const NullModel& model, const Eigen::MatrixXd& z, Eigen::Index k,
                                        RobustErrors robust) {
  const Eigen::Index p = model.design.cols();
  const Eigen::Index m = k + 1;
  const Eigen::VectorXd null_root_w = model.weights.cwiseSqrt();
  {
    const Eigen::MatrixXd weighted = null_root_w.asDiagonal() * z;
    if (!tail_estimable(thin_qr(weighted), weighted, m)) return not_estimable(k);
  }
  Eigen::VectorXd start = Eigen::VectorXd::Zero(p + m);
  start.head(p) = model.coefficients;
  detail::LogisticFit full = detail::fit_logistic(z, model.y, start, 100);
  // fit_logistic may stop once the deviance no longer moves, which leaves an
  // interaction column of small values (a continuous exposure near 0)
  // short of its optimum by about 1e-4; a second run from there takes the
  // Newton steps that remain.
  if (full.converged && !full.separated) {
    const detail::LogisticFit polished = detail::fit_logistic(z, model.y, full.coefficients, 100);
    if (polished.converged) {
      const int iterations = full.iterations + polished.iterations;
      full = polished;
      full.iterations = iterations;
    }
  }
  const detail::LogisticFit main_only =
      detail::fit_logistic(z.leftCols(p + 1), model.y, start.head(p + 1), 100);

  InteractionFit fit;
  const ThinQr qr = thin_qr(full.weights.cwiseSqrt().asDiagonal() * z);
  fill_wald(qr, full.coefficients.tail(m), 1.0, 0.0, model.y - full.mu, full.weights, robust, fit);
  fit.interaction_lr = lr_test(main_only.deviance - full.deviance, k);
  fit.joint_lr = lr_test(model.rss - full.deviance, m);
  fit.iterations = full.iterations;
  fit.converged = full.converged && !full.separated && main_only.converged && !main_only.separated;
  return fit;
}

}  // namespace

const char* robust_errors_name(RobustErrors robust) {
  switch (robust) {
    case RobustErrors::off: return "off";
    case RobustErrors::hc0: return "hc0";
    case RobustErrors::hc3: return "hc3";
  }
  return "off";
}

InteractionFit fit_interaction(const NullModel& model, const Eigen::MatrixXd& exposure,
                               const Eigen::VectorXd& genotype, RobustErrors robust) {
  const Eigen::MatrixXd z = interaction_design(model, exposure, genotype);
  if (model.kind == TraitKind::quantitative) return fit_linear(model, z, exposure.cols(), robust);
  return fit_logistic_interaction(model, z, exposure.cols(), robust);
}

}  // namespace tamis
