#include "logistic_fit.hpp"

#include <algorithm>
#include <cmath>

namespace tamis::detail {
namespace {

// ln(1 + exp(x)) without overflow or loss of precision.
double softplus(double x) {
  if (x > 0.0) return x + std::log1p(std::exp(-x));
  return std::log1p(std::exp(x));
}

// mu and 1 - mu, each computed directly so neither loses precision; eta is
// clamped to +-700 so the weights stay normal numbers.
void probabilities(double eta, double* mu, double* one_minus_mu) {
  const double e = std::clamp(eta, -700.0, 700.0);
  if (e >= 0.0) {
    const double t = std::exp(-e);
    *mu = 1.0 / (1.0 + t);
    *one_minus_mu = t / (1.0 + t);
  } else {
    const double t = std::exp(e);
    *mu = t / (1.0 + t);
    *one_minus_mu = 1.0 / (1.0 + t);
  }
}

bool all_finite(const Eigen::VectorXd& v) { return v.allFinite(); }

}  // namespace

double logistic_deviance(const Eigen::VectorXd& y, const Eigen::VectorXd& eta) {
  double sum = 0.0;
  for (Eigen::Index s = 0; s < y.size(); ++s) {
    sum += y[s] > 0.5 ? softplus(-eta[s]) : softplus(eta[s]);
  }
  return 2.0 * sum;
}

LogisticFit fit_logistic(const Eigen::MatrixXd& design, const Eigen::VectorXd& y,
                         const Eigen::VectorXd& start, int max_iterations) {
  const Eigen::Index n = design.rows();
  const Eigen::Index p = design.cols();
  LogisticFit fit;
  fit.coefficients = start;
  Eigen::VectorXd eta = design * start;
  double deviance = logistic_deviance(y, eta);

  Eigen::VectorXd sqrt_w(n), working(n);
  Eigen::MatrixXd weighted(n, p);
  for (int iteration = 1; iteration <= max_iterations; ++iteration) {
    for (Eigen::Index s = 0; s < n; ++s) {
      double mu, one_minus_mu;
      probabilities(eta[s], &mu, &one_minus_mu);
      const double w = mu * one_minus_mu;
      sqrt_w[s] = std::sqrt(w);
      const double residual = y[s] > 0.5 ? one_minus_mu : -mu;
      working[s] = residual / sqrt_w[s];
    }
    weighted = sqrt_w.asDiagonal() * design;
    Eigen::VectorXd step = weighted.householderQr().solve(working);
    if (!all_finite(step)) break;

    Eigen::VectorXd next = fit.coefficients + step;
    Eigen::VectorXd next_eta = design * next;
    double next_deviance = logistic_deviance(y, next_eta);
    // Step halving while the deviance goes up (allowing for rounding at the optimum).
    const double slack = 1e-13 * (std::fabs(deviance) + 1.0);
    int halvings = 0;
    while (!(next_deviance <= deviance + slack) && halvings < 60) {
      step *= 0.5;
      next = fit.coefficients + step;
      next_eta = design * next;
      next_deviance = logistic_deviance(y, next_eta);
      ++halvings;
    }
    if (!std::isfinite(next_deviance) || !all_finite(next)) break;

    const double max_step = step.cwiseAbs().maxCoeff();
    const double scale = 1.0 + next.cwiseAbs().maxCoeff();
    const double relative_change = std::fabs(deviance - next_deviance) / (std::fabs(next_deviance) + 0.1);
    fit.coefficients = next;
    eta = next_eta;
    deviance = next_deviance;
    fit.iterations = iteration;
    fit.last_step = max_step;
    if (max_step < 1e-10 * scale || (relative_change < 1e-12 && max_step < 1e-6 * scale)) {
      fit.converged = true;
      break;
    }
    if (halvings == 60) break;  // no step lowers the deviance any more
  }

  fit.eta = eta;
  fit.deviance = deviance;
  fit.mu.resize(n);
  fit.weights.resize(n);
  double max_eta = 0.0;
  for (Eigen::Index s = 0; s < n; ++s) {
    double mu, one_minus_mu;
    probabilities(eta[s], &mu, &one_minus_mu);
    fit.mu[s] = mu;
    fit.weights[s] = mu * one_minus_mu;
    max_eta = std::max(max_eta, std::fabs(eta[s]));
  }
  fit.separated = max_eta > 30.0;
  return fit;
}

}  // namespace tamis::detail
