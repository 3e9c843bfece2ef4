// The standard normal distribution: log upper tail and quantile.
//
// The tail reuses the chi-square(1) tail, since P(|Z| > z) = P(chi2_1 > z^2):
// P(Z > z) = P(chi2_1 > z^2) / 2 for z >= 0, and 1 minus that for z < 0.
//
// The quantile is Wichura's algorithm AS 241 (PPND16), Applied Statistics 37
// (1988) 477-484: rational approximations of degree 7 in three regions, with
// the published coefficients below.
#include <cmath>
#include <limits>
#include <stdexcept>

#include "tamis/distributions.hpp"

namespace tamis {
namespace {

constexpr double kLn2 = 0.69314718055994530942;

// Evaluates c[0] + c[1] x + ... + c[7] x^7 (Horner).
double evaluate_polynomial(const double (&c)[8], double x) {
  double value = c[7];
  for (int k = 6; k >= 0; --k) value = value * x + c[k];
  return value;
}

// AS 241 coefficients, central region |p - 1/2| <= 0.425.
constexpr double kCentralNumerator[8] = {
    3.3871328727963666080e0, 1.3314166789178437745e+2, 1.9715909503065514427e+3,
    1.3731693765509461125e+4, 4.5921953931549871457e+4, 6.7265770927008700853e+4,
    3.3430575583588128105e+4, 2.5090809287301226727e+3};
constexpr double kCentralDenominator[8] = {
    1.0, 4.2313330701600911252e+1, 6.8718700749205790830e+2, 5.3941960214247511077e+3,
    2.1213794301586595867e+4, 3.9307895800092710610e+4, 2.8729085735721942674e+4,
    5.2264952788528545610e+3};
// Intermediate tail region, sqrt(-ln min(p, 1 - p)) <= 5.
constexpr double kNearNumerator[8] = {
    1.42343711074968357734e0, 4.63033784615654529590e0, 5.76949722146069140550e0,
    3.64784832476320460504e0, 1.27045825245236838258e0, 2.41780725177450611770e-1,
    2.27238449892691845833e-2, 7.74545014278341407640e-4};
constexpr double kNearDenominator[8] = {
    1.0, 2.05319162663775882187e0, 1.67638483018380384940e0, 6.89767334985100004550e-1,
    1.48103976427480074590e-1, 1.51986665636164571966e-2, 5.47593808499534494600e-4,
    1.05075007164441684324e-9};
// Far tail region.
constexpr double kFarNumerator[8] = {
    6.65790464350110377720e0, 5.46378491116411436990e0, 1.78482653991729133580e0,
    2.96560571828504891230e-1, 2.65321895265761230930e-2, 1.24266094738807843860e-3,
    2.71155556874348757815e-5, 2.01033439929228813265e-7};
constexpr double kFarDenominator[8] = {
    1.0, 5.99832206555887937690e-1, 1.36929880922735805310e-1, 1.48753612908506148525e-2,
    7.86869131145613259100e-4, 1.84631831751005468180e-5, 1.42151175831644588870e-7,
    2.04426310338993978564e-15};

}  // namespace

double log_normal_upper_tail(double z) {
  if (std::isnan(z)) return 0.0;  // p = 1 rather than a NaN that spreads
  if (z == 0.0) return -kLn2;
  const double log_two_sided = log_chisq1_upper_tail(z * z);  // ln P(|Z| > |z|)
  if (z > 0.0) {
    if (log_two_sided <= -std::numeric_limits<double>::max() / 2.0) return log_two_sided;
    return log_two_sided - kLn2;
  }
  // ln(1 - P(|Z| > |z|) / 2), the half tail being at most 1/2.
  return std::log1p(-0.5 * std::exp(log_two_sided));
}

double normal_quantile(double p) {
  if (!(p >= 0.0 && p <= 1.0)) throw std::domain_error("normal_quantile: p must be in [0, 1]");
  if (p == 0.0) return -std::numeric_limits<double>::infinity();
  if (p == 1.0) return std::numeric_limits<double>::infinity();
  const double q = p - 0.5;
  if (std::fabs(q) <= 0.425) {
    const double r = 0.180625 - q * q;
    return q * evaluate_polynomial(kCentralNumerator, r) / evaluate_polynomial(kCentralDenominator, r);
  }
  double r = q < 0.0 ? p : 1.0 - p;  // the smaller tail; 1 - p is exact for p > 0.5
  r = std::sqrt(-std::log(r));
  double z;
  if (r <= 5.0) {
    r -= 1.6;
    z = evaluate_polynomial(kNearNumerator, r) / evaluate_polynomial(kNearDenominator, r);
  } else {
    r -= 5.0;
    z = evaluate_polynomial(kFarNumerator, r) / evaluate_polynomial(kFarDenominator, r);
  }
  return q < 0.0 ? -z : z;
}

}  // namespace tamis
