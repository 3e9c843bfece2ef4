// The distribution of uniform order statistics, for the QQ plot's band:
// under the null the i-th smallest of n p-values follows Beta(i, n - i + 1).
#pragma once

namespace tamis::report {

// The regularized incomplete beta function I_x(a, b), a > 0, b > 0, 0 <= x <= 1.
double regularized_incomplete_beta(double x, double a, double b);

// The q-quantile of Beta(a, b): the x with I_x(a, b) = q, 0 < q < 1.
double beta_quantile(double q, double a, double b);

}  // namespace tamis::report
