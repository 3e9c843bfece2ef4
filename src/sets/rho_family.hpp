// The family of statistics Q_rho = (1 - rho) Q + rho B^2 of the optimal
// combination (Lee et al. 2012, AJHG 91:224-237). Private to src/sets.
#pragma once

#include <Eigen/Dense>
#include <vector>

#include "tamis/set_tests.hpp"

namespace tamis::sets_detail {

// Eigenvalues of a symmetric matrix, tiny negatives (rounding) set to 0.
std::vector<double> nonnegative_eigenvalues(const Eigen::MatrixXd& symmetric);

// Under the null, Z = diag(w) U ~ N(0, K) and Q_rho = Z' R_rho Z with
// R_rho = (1 - rho) I + rho 1 1', a mixture of chi-square(1) with the
// eigenvalues of R_rho^1/2 K R_rho^1/2; at rho = 1 the single eigenvalue 1'K1.
struct RhoFamily {
  std::vector<double> rho;
  std::vector<std::vector<double>> eigenvalues;
};
RhoFamily decompose_rho_family(const Eigen::MatrixXd& weighted_covariance, const std::vector<double>& rho_grid);

// ln of the optimal combination's p-value for the smallest per-rho ln p.
double optimal_log_p_from_family(const Eigen::MatrixXd& weighted_covariance, const RhoFamily& family,
                                 double min_log_p, SetTestPrecision precision = SetTestPrecision::exact);

}  // namespace tamis::sets_detail
