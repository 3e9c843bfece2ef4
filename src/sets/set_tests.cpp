// The set tests from per-variant scores U and their null covariance Phi:
// burden, variance component, and their optimal combination over a grid of
// rho (Lee et al. 2012, AJHG 91:224-237); Beta-density weights (Wu et al.
// 2011, AJHG 89:82-93).
#include <Eigen/Dense>
#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

#include "sets/rho_family.hpp"
#include "tamis/distributions.hpp"
#include "tamis/set_tests.hpp"

namespace tamis {

SetTestResult test_variant_set(const Eigen::VectorXd& u, const Eigen::MatrixXd& covariance,
                               const Eigen::VectorXd& weights, const std::vector<double>& rho_grid,
                               SetTestPrecision precision) {
  auto tail = [precision](const std::vector<double>& eigenvalues, double q) {
    return precision == SetTestPrecision::exact ? mixture_chisq_upper_tail(eigenvalues, q)
                                                : screening_mixture_upper_tail(eigenvalues, q);
  };
  const Eigen::Index m = u.size();
  if (m == 0 || covariance.rows() != m || covariance.cols() != m || weights.size() != m)
    throw std::invalid_argument("test_variant_set: u, covariance and weights must agree in size (and not be empty)");
  if (rho_grid.empty() || !std::is_sorted(rho_grid.begin(), rho_grid.end()))
    throw std::invalid_argument("test_variant_set: the rho grid must be non-empty and increasing");

  SetTestResult result;
  const Eigen::VectorXd weighted_u = weights.cwiseProduct(u);
  const Eigen::MatrixXd k = weights.asDiagonal() * covariance * weights.asDiagonal();

  result.burden_score = weighted_u.sum();
  result.burden_variance = k.sum();
  if (result.burden_variance > 0.0) {
    result.burden_chisq = result.burden_score * result.burden_score / result.burden_variance;
    result.burden_log_p = log_chisq1_upper_tail(result.burden_chisq);
  }

  result.variance_q = weighted_u.squaredNorm();
  const std::vector<double> eigenvalues = sets_detail::nonnegative_eigenvalues(0.5 * (k + k.transpose()));
  const MixtureTail variance_tail = tail(eigenvalues, result.variance_q);
  result.variance_log_p = variance_tail.log_p;
  result.variance_method = variance_tail.method;

  // The per-rho p-values; Q_0 is the variance component and Q_1 = B^2 the
  // burden, so both are taken from above rather than recomputed.
  const sets_detail::RhoFamily family = sets_detail::decompose_rho_family(k, rho_grid);
  result.optimal_min_log_p = std::numeric_limits<double>::infinity();
  for (std::size_t index = 0; index < rho_grid.size(); ++index) {
    const double rho = rho_grid[index];
    double log_p;
    if (rho == 0.0) {
      log_p = result.variance_log_p;
    } else if (rho == 1.0) {
      log_p = result.burden_log_p;
    } else {
      const double q_rho = (1.0 - rho) * result.variance_q + rho * result.burden_score * result.burden_score;
      log_p = tail(family.eigenvalues[index], q_rho).log_p;
    }
    if (log_p < result.optimal_min_log_p) {
      result.optimal_min_log_p = log_p;
      result.optimal_rho = rho;
    }
  }
  result.optimal_log_p = sets_detail::optimal_log_p_from_family(k, family, result.optimal_min_log_p, precision);
  return result;
}

Eigen::VectorXd saddlepoint_calibrated_scores(const Eigen::VectorXd& u, const Eigen::VectorXd& variances,
                                              const std::vector<double>& log_p) {
  if (variances.size() != u.size() || log_p.size() != static_cast<std::size_t>(u.size()))
    throw std::invalid_argument("saddlepoint_calibrated_scores: one variance and one p-value per score");
  Eigen::VectorXd calibrated = u;
  for (Eigen::Index unit_idx = 0; unit_idx < u.size(); ++unit_idx) {
    const double variance = variances[unit_idx], log_p_value = log_p[static_cast<std::size_t>(unit_idx)];
    if (!(variance > 0.0) || std::isnan(log_p_value) || u[unit_idx] * u[unit_idx] / variance < 4.0) continue;
    const double deviate = std::sqrt(variance * chisq1_quantile_of_log_p(log_p_value));
    calibrated[unit_idx] = u[unit_idx] < 0.0 ? -deviate : deviate;
  }
  return calibrated;
}

double beta_density_weight(double maf, double a, double b) {
  if (!(maf > 0.0 && maf < 1.0) || !(a > 0.0) || !(b > 0.0))
    throw std::invalid_argument("beta_density_weight: maf must lie in (0, 1), a and b must be positive");
  const double log_beta_function = std::lgamma(a) + std::lgamma(b) - std::lgamma(a + b);
  return std::exp((a - 1.0) * std::log(maf) + (b - 1.0) * std::log1p(-maf) - log_beta_function);
}

}  // namespace tamis
