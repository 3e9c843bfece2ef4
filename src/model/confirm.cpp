// Confirmation refits of the full model [X g]: Wald and likelihood-ratio tests.
#include "tamis/confirm.hpp"

#include <cfloat>
#include <cmath>

#include "logistic_fit.hpp"
#include "tamis/distributions.hpp"

namespace tamis {
namespace {

Eigen::MatrixXd full_design(const NullModel& model, const Eigen::VectorXd& genotype) {
  const Eigen::Index n = model.design.rows();
  const Eigen::Index p = model.design.cols();
  Eigen::MatrixXd x(n, p + 1);
  x.leftCols(p) = model.design;
  x.col(p) = genotype;
  return x;
}

// True when g's component outside the covariate span is negligible (the R
// diagonal element of the QR of [X g], relative to |g|).
bool in_covariate_span(double r_last, double g_norm) {
  return !(std::fabs(r_last) > 1e-9 * g_norm);
}

ConfirmResult confirm_linear(const NullModel& model, const Eigen::VectorXd& genotype) {
  ConfirmResult out;
  const Eigen::Index n = model.design.rows();
  const Eigen::Index p = model.design.cols();
  const Eigen::MatrixXd x = full_design(model, genotype);
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(x);
  const double r_last = qr.matrixQR()(p, p);
  if (in_covariate_span(r_last, genotype.norm())) {
    out.converged = false;  // not estimable: the variant adds nothing to the covariates
    return out;
  }
  const Eigen::VectorXd b = qr.solve(model.y);
  const Eigen::VectorXd residuals = model.y - x * b;
  // RSS0 - RSS1 is the squared last component of Q'y (the part of y along the
  // adjusted genotype); computing it directly keeps small effects exact.
  const Eigen::VectorXd qty = qr.householderQ().adjoint() * model.y;
  const double explained = qty[p] * qty[p];
  double rss1 = residuals.squaredNorm();
  rss1 = std::fmax(rss1, model.rss * 1e-300);
  rss1 = std::fmax(rss1, DBL_MIN);
  const double df = static_cast<double>(n - p - 1);
  const double sigma1 = std::sqrt(rss1 / df);
  out.beta = b[p];
  out.se = sigma1 / std::fabs(r_last);
  const double t = out.beta / out.se;
  out.wald_chisq = t * t;
  out.wald_log_p = log_student_t_two_sided(t, df);
  out.lrt_chisq = static_cast<double>(n) * std::log1p(explained / rss1);
  out.lrt_log_p = log_chisq1_upper_tail(out.lrt_chisq);
  out.iterations = 0;
  out.converged = true;
  return out;
}

ConfirmResult confirm_logistic(const NullModel& model, const Eigen::VectorXd& genotype) {
  ConfirmResult out;
  const Eigen::Index p = model.design.cols();
  const Eigen::MatrixXd x = full_design(model, genotype);
  {
    // Estimability under the null weights.
    Eigen::MatrixXd weighted = model.weights.cwiseSqrt().asDiagonal() * x;
    Eigen::HouseholderQR<Eigen::MatrixXd> qr(weighted);
    const double g_norm = (model.weights.cwiseSqrt().array() * genotype.array()).matrix().norm();
    if (in_covariate_span(qr.matrixQR()(p, p), g_norm)) {
      out.converged = false;
      return out;
    }
  }
  Eigen::VectorXd start(p + 1);
  start.head(p) = model.coefficients;
  start[p] = 0.0;
  const detail::LogisticFit fit = detail::fit_logistic(x, model.y, start, 100);

  // SE from the inverse Fisher information (X'WX)^-1 at the fit: with
  // W^1/2 X = QR, its last diagonal element is 1 / R_pp^2.
  Eigen::MatrixXd weighted = fit.weights.cwiseSqrt().asDiagonal() * x;
  Eigen::HouseholderQR<Eigen::MatrixXd> qr(weighted);
  const double r_last = std::fabs(qr.matrixQR()(p, p));
  out.beta = fit.coefficients[p];
  out.se = r_last > 0.0 ? 1.0 / r_last : DBL_MAX;
  if (!std::isfinite(out.se)) out.se = DBL_MAX;
  const double z = out.beta / out.se;
  out.wald_chisq = z * z;
  out.wald_log_p = log_chisq1_upper_tail(out.wald_chisq);
  out.lrt_chisq = std::fmax(0.0, model.rss - fit.deviance);
  out.lrt_log_p = log_chisq1_upper_tail(out.lrt_chisq);
  out.iterations = fit.iterations;
  out.converged = fit.converged && !fit.separated;
  return out;
}

}  // namespace

ConfirmResult confirm_variant(const NullModel& model, const Eigen::VectorXd& genotype) {
  if (model.kind == TraitKind::quantitative) return confirm_linear(model, genotype);
  return confirm_logistic(model, genotype);
}

}  // namespace tamis
