// Variant-set tests from per-variant scores: the burden test, the
// variance-component test, their optimal combination, and Cauchy
// combinations of p-values. Pure computation: no I/O.
//
// Every test reads the same two things, computed against the trait's one
// null fit: the scores U (m values) and their null covariance Phi (m x m).
// With per-variant weights w, Z = diag(w) U has covariance K = diag(w) Phi diag(w).
#pragma once

#include <Eigen/Dense>
#include <vector>

namespace tamis {

// How precisely the mixture tails are taken. `exact`: as
// mixture_chisq_upper_tail (relative accuracy 1e-6 or better at any p).
// `screening`: the saddlepoint approximation above the mean and moment
// matching below it, a few percent at worst but some hundred times cheaper;
// a scan screens every set so and takes the sets that come out small again
// exactly, as it refits only the single variants that come out small.
enum class SetTestPrecision { exact, screening };

// ---- tails of mixtures of chi-square(1) variables --------------------------

// How mixture_chisq_upper_tail reached its value.
enum class MixtureTailMethod {
  single_chisq,       // one non-zero eigenvalue: the chi-square(1) tail itself
  davies,             // characteristic-function inversion (Davies 1980) at its target accuracy
  saddlepoint,        // the contour inversion did not converge: saddlepoint approximation (Kuonen 1999)
  moment_matching,    // nothing else applied (Liu et al. 2009)
  contour_inversion,  // p below 1e-3, or Davies too costly: the Bromwich integral through the saddlepoint
};
// "chisq1", "davies", "saddlepoint", "moments", "inversion"
const char* mixture_tail_method_name(MixtureTailMethod method);

struct MixtureTail {
  double log_p = 0.0;  // ln P(Q > q); finite, never -inf: p is never reported as 0
  MixtureTailMethod method = MixtureTailMethod::davies;
};

// ln P(Q > q) for Q = sum_k lambda_k X_k, X_k independent chi-square(1),
// lambda_k >= 0 (eigenvalues below 1e-12 of the largest are dropped).
// Davies' inversion (absolute accuracy 1e-9) where it reaches that accuracy
// within 2000 terms and p is at least 1e-3, so that its relative error stays
// within 1e-6; the contour inversion otherwise (relative accuracy about 1e-9
// for any p, far below 1e-300 too: within 1.2e-13 of mpmath in
// tests/test_set_tests.cpp); the
// saddlepoint approximation above the mean where the inversion does not
// converge, moment matching where nothing else applies. q <= 0 gives 0, and
// so does a mixture without a positive eigenvalue.
MixtureTail mixture_chisq_upper_tail(const std::vector<double>& eigenvalues, double q);
// The screening tail: saddlepoint above the mean, moment matching elsewhere.
MixtureTail screening_mixture_upper_tail(const std::vector<double>& eigenvalues, double q);

// The methods on their own, for tests.
struct DaviesTail {
  double p = 1.0;           // P(Q > q)
  bool reached = false;     // the truncation and integration error bound met the accuracy
  int terms = 0;            // integration terms used (term_limit where not reached)
};
// Davies (1980), Applied Statistics 29:323-333, for central chi-square(1)
// terms and no normal component; `accuracy` is the absolute error bound on p.
// Where more than term_limit terms would be needed, even with the
// convergence factor, the sum of term_limit terms is returned unreached.
DaviesTail davies_upper_tail(const std::vector<double>& eigenvalues, double q, double accuracy = 1e-9,
                             int term_limit = 100000);
// Liu, Tang & Zhang (2009), CSDA 53:853-856: the chi-square matched on the
// first four cumulants. Returns ln p.
double moment_matching_upper_log_tail(const std::vector<double>& eigenvalues, double q);
// Kuonen (1999), Biometrika 86:929-935, Lugannani-Rice form. Returns ln p;
// only for q above the mean (sum of eigenvalues): NaN otherwise, and where q is
// so close to the mean that the formula loses its digits.
double saddlepoint_upper_log_tail(const std::vector<double>& eigenvalues, double q);
// P(Q > q) = (1/2 pi i) int M(s) e^{-sq} / s ds, M(s) = E e^{sQ}, along the
// parabola t + a y^2 + i y through the saddlepoint t (a: the steepest-descent
// path's curvature there), summed by the trapezoidal rule with the step halved
// until two sums agree to 1e-9.
struct InversionTail {
  double log_p = 0.0;
  bool converged = false;
  int nodes = 0;  // integrand evaluations
};
InversionTail contour_inversion_upper_log_tail(const std::vector<double>& eigenvalues, double q);

// ---- Cauchy combination ------------------------------------------------------

// ln p of the Cauchy combination T = sum_i w_i tan((1/2 - p_i) pi) / sum_i w_i
// (Liu & Xie 2020, JASA 115:393-402; Liu et al. 2019, AJHG 104:410-421),
// p = 1/2 - arctan(T) / pi, computed so that tiny p_i (ln p far below -700)
// give a finite, accurate result. Equal weights when `weights` is empty.
// A p_i of 1 would add -inf to T; it is taken as just below 1.
double cauchy_combination_log_p(const std::vector<double>& log_p, const std::vector<double>& weights = {});

// ---- the set tests ------------------------------------------------------------

// The optimal combination's grid (Lee et al. 2012, AJHG 91:224-237).
inline const std::vector<double> kOptimalRhoGrid = {0.0, 0.01, 0.04, 0.09, 0.16, 0.25, 0.5, 1.0};

struct SetTestResult {
  // Burden: B = sum_j w_j U_j, chi-square B^2 / (w' Phi w).
  double burden_score = 0.0;     // B
  double burden_variance = 0.0;  // w' Phi w
  double burden_chisq = 0.0;
  double burden_log_p = 0.0;
  // Variance component: Q = sum_j w_j^2 U_j^2 against the mixture with the
  // eigenvalues of K = diag(w) Phi diag(w).
  double variance_q = 0.0;
  double variance_log_p = 0.0;
  MixtureTailMethod variance_method = MixtureTailMethod::davies;
  // Optimal combination: Q_rho = (1 - rho) Q + rho B^2 over the grid; the
  // statistic is the smallest of the per-rho p-values, its p-value the
  // published one-dimensional integral.
  double optimal_rho = 0.0;        // the rho with the smallest p
  double optimal_min_log_p = 0.0;  // ln of that smallest per-rho p
  double optimal_log_p = 0.0;
};

// `u` (m), `covariance` (m x m, symmetric positive semi-definite), `weights`
// (m, positive). `rho_grid` values in [0, 1], increasing, including 0.
SetTestResult test_variant_set(const Eigen::VectorXd& u, const Eigen::MatrixXd& covariance,
                               const Eigen::VectorXd& weights,
                               const std::vector<double>& rho_grid = kOptimalRhoGrid,
                               SetTestPrecision precision = SetTestPrecision::exact);

// The optimal combination's p-value for a given smallest per-rho p (ln
// min_log_p), from K's decomposition (exposed for the reference check).
double optimal_combination_log_p(const Eigen::MatrixXd& weighted_covariance, const std::vector<double>& rho_grid,
                                 double min_log_p, SetTestPrecision precision = SetTestPrecision::exact);

// q with ln P(chi-square(1) > q) = log_p, for any log_p < 0 (also far below
// the smallest double): the chi-square a p-value stands for.
double chisq1_quantile_of_log_p(double log_p);

// Binary traits: scores whose own p-values came from the saddlepoint
// (`log_p`, two-sided, NaN where none is known), each moved to the normal
// deviate of its p-value on its own scale,
//   u'_j = sign(u_j) sqrt(v_j F^-1(1 - p_j)),  F the chi-square(1) distribution,
// where its chi-square u_j^2 / v_j is at least 4 (below it a single
// variant's test keeps the normal tail, and so the score stands).
//
// Why (ours): rare variants with few cases among their carriers have skewed
// scores, and a mixture of chi-square(1) built on their covariance is then
// anti-conservative. Each u'_j has, to the saddlepoint's accuracy, the
// normal law N(0, v_j) the mixture assumes in its two-sided tails, so with
// the weights and the covariance kept as they are, Q' = sum w_j^2 u'_j^2 has
// the mixture's law when the scores are independent (disjoint carriers),
// and their correlations enter as a Gaussian copula otherwise. Widening
// each variance to u_j^2 / F^-1(1 - p_j) and keeping Q instead (Zhao et al.
// 2020, AJHG 106:3-12, as we recall it) gives a score far out on the long
// side of its skew a larger eigenvalue as well: the test's weights then
// follow the data and it runs above its level.
Eigen::VectorXd saddlepoint_calibrated_scores(const Eigen::VectorXd& u, const Eigen::VectorXd& variances,
                                              const std::vector<double>& log_p);

// Beta(maf; a, b) density as a variant weight (Wu et al. 2011, AJHG 89:82-93:
// a = 1, b = 25 by default), maf the minor allele frequency in (0, 0.5].
double beta_density_weight(double maf, double a = 1.0, double b = 25.0);

}  // namespace tamis
