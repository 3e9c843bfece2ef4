// The cumulant generating function of a mixture Q = sum_k lambda_k X_k of
// independent chi-square(1) variables, shared by Davies' inversion (its
// Chernoff bounds), the saddlepoint approximation and the contour inversion.
// Private to src/sets.
#pragma once

#include <vector>

#include "tamis/set_tests.hpp"

namespace tamis::sets_detail {

// The eigenvalues that count: positive, at least 1e-12 of the largest, sorted
// from the largest down.
std::vector<double> kept_eigenvalues(const std::vector<double>& eigenvalues);

// K(t) = -1/2 sum_k ln(1 - 2 t lambda_k) + normal_variance t^2 / 2, for
// t < 1/(2 lambda_max). It is evaluated through z = 1 - 2 t lambda_max, in
// which d_k = 1 - 2 t lambda_k = r_k + z (1 - r_k) with r_k = 1 - lambda_k /
// lambda_max taken exactly: far in the upper tail t comes within 1e-6 or less
// of 1/(2 lambda_max) and d_1 = z must not be a difference of nearly equal
// numbers.
class MixtureCgf {
 public:
  // `lambdas` as kept_eigenvalues returns them (not empty).
  explicit MixtureCgf(std::vector<double> lambdas, double normal_variance = 0.0);

  const std::vector<double>& lambdas() const { return lambdas_; }
  double largest() const { return lambdas_.front(); }
  double mean() const { return mean_; }  // sum of the eigenvalues
  double normal_variance() const { return normal_variance_; }

  double t_of(double z) const { return (1.0 - z) / (2.0 * lambdas_.front()); }
  double d(std::size_t k, double z) const { return gap_[k] + z * (1.0 - gap_[k]); }
  double cgf(double z) const;         // K(t(z))
  double derivative(double z) const;  // K'(t(z))
  // z with K'(t(z)) = target: the saddlepoint of the tail at `target`.
  double solve(double target) const;
  // ln of the Chernoff bound on P(Q > y) (y above the mean) or on P(Q < y)
  // (y below it): K(t) - t y at the saddlepoint; 0 at the mean.
  double log_chernoff_bound(double y) const;

 private:
  std::vector<double> lambdas_;
  std::vector<double> gap_;  // r_k
  double mean_ = 0.0;
  double normal_variance_ = 0.0;
};

// ln P(Q > q) by the moment-matched chi-square (moment_matching_upper_log_tail,
// capped at 0) for many q of one mixture: the eigenvalues kept and their
// cumulants matched once, so that a point costs one incomplete gamma function.
class MatchedChisqTail {
 public:
  explicit MatchedChisqTail(const std::vector<double>& eigenvalues);
  double log_upper_tail(double q) const;

 private:
  bool any_ = false;
  double mean_ = 0.0, sd_ = 0.0, df_ = 0.0;
};

// ln P(Q > q) for many q of one mixture within [low, high]: Davies' sum with
// one step and one number of terms that serve every point of the range, its
// terms (the characteristic function at the nodes) computed once, so that a
// point then costs one pass of complex multiply-adds instead of a logarithm
// and an arc tangent per node and eigenvalue. Where that sum cannot give
// relative accuracy 1e-6 (p below 1e-3, a point outside the range, or a
// plan beyond the term budget), the point goes to mixture_chisq_upper_tail.
// The optimal combination evaluates its mixtures at hundreds of points.
class MixtureTailTable {
 public:
  MixtureTailTable(const std::vector<double>& eigenvalues, double low, double high);
  // `absolute_will_do`: the caller needs only absolute accuracy 1e-9 (a sum
  // whose total is at least 1e-3, or a bracket that only has to point the
  // way), so the table's value is taken below p = 1e-3 too.
  double log_upper_tail(double q, bool absolute_will_do = false) const;

 private:
  std::vector<double> lambdas_;
  double low_ = 0.0, high_ = 0.0;
  double delta_ = 0.0;
  bool usable_ = false;
  std::vector<double> terms_re_, terms_im_;  // |phi_k| e^{i theta_k} / (pi (k + 1/2)), theta without the -u c part
};

// q with ln P(Q > q) = log_p for the mixture (root-finding on its tail),
// started from the moment-matching quantile.
double mixture_upper_quantile(const std::vector<double>& eigenvalues, double log_p,
                              SetTestPrecision precision = SetTestPrecision::exact);

// q with ln P(X > q) = log_p for X ~ chi-square(1), for any log_p < 0
// (also below the smallest double).
double chisq1_upper_quantile_from_log(double log_p);

// ln(e^a + e^b).
double log_add(double a, double b);

}  // namespace tamis::sets_detail
