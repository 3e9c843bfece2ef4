// Tail probabilities computed in log space, so that -log10 p stays exact far
// below the smallest double (chi-square statistics of 5000 and more).
#pragma once

namespace tamis {

// Natural log of P(X > stat) for X ~ chi-square with 1 degree of freedom.
// stat <= 0 gives 0 (p = 1). Exact (relative error ~1e-15) for stat up to 1e5.
double log_chisq1_upper_tail(double stat);

// Natural log of the two-sided tail P(|T| > |t|) for Student's t with `df`
// degrees of freedom (df > 0). Exact in the same sense as above.
double log_student_t_two_sided(double t, double df);

// Natural log of P(X > stat) for X ~ chi-square with `df` (a positive
// integer) degrees of freedom, from the closed forms of the upper incomplete
// gamma function at integer and half-integer shape: every term is positive,
// so the log stays exact far into the tail.
double log_chisq_upper_tail(double stat, int df);

// Natural log of P(F > f) for F with (df1, df2) degrees of freedom.
double log_f_upper_tail(double f, double df1, double df2);

// Natural log of the regularized incomplete beta function I_x(a, b).
double log_regularized_incomplete_beta(double x, double a, double b);

// The upper-tail quantile q with P(chi2_1 > q) = p, for 0 < p < 1.
double chisq1_upper_quantile(double p);

// -log10(p) from ln(p).
double neg_log10_from_log(double log_p);

// Natural log of P(Z > z) for a standard normal Z; exact in the sense above
// for any finite z (z = +inf gives -DBL_MAX, z = -inf gives 0).
double log_normal_upper_tail(double z);

// The standard normal quantile z with P(Z <= z) = p, for 0 < p < 1
// (Wichura 1988, algorithm AS 241; relative error about 1e-16).
double normal_quantile(double p);

}  // namespace tamis
