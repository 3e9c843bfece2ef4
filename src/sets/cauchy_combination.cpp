// The Cauchy combination of p-values (Liu & Xie 2020, JASA 115:393-402):
//   T = sum_i w_i tan((1/2 - p_i) pi) / sum_i w_i,   p = 1/2 - arctan(T) / pi.
//
// tan((1/2 - p) pi) = cot(p pi) runs from +inf (p -> 0) to -inf (p -> 1), and
// p_i far below the smallest double arrive as ln p_i. The positive and the
// negative terms are therefore summed apart, each as a log-sum-exp:
// cot(p pi) = 1 / (p pi) (1 - (p pi)^2 / 3 + ...), so below p = 1e-8 the term's
// log is -ln p - ln pi to double precision, whatever the size of -ln p; a p_i
// above 1/2 gives -cot((1 - p_i) pi) with 1 - p_i = -expm1(ln p_i) exact.
// For T > 0, p = arctan(1/T) / pi, and beyond T = 1e150 arctan(1/T) = 1/T to
// double precision, so ln p = -ln T - ln pi keeps its digits for any T.
#include <algorithm>
#include <cmath>
#include <limits>
#include <stdexcept>

#include "sets/mixture_cgf.hpp"
#include "tamis/set_tests.hpp"

namespace tamis {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kNegativeInfinity = -std::numeric_limits<double>::infinity();

// ln |cot(p pi)| for p = exp(log_p) in (0, 1/2]: the log of a positive term.
double log_cotangent_small(double log_p) {
  if (log_p < std::log(1e-8)) return -log_p - std::log(kPi);
  return -std::log(std::tan(std::exp(log_p) * kPi));
}

}  // namespace

double cauchy_combination_log_p(const std::vector<double>& log_p, const std::vector<double>& weights) {
  if (!weights.empty() && weights.size() != log_p.size())
    throw std::invalid_argument("cauchy_combination_log_p: one weight per p-value");
  double log_positive = kNegativeInfinity;  // ln of the sum of w_i cot(p_i pi) over p_i < 1/2
  double log_negative = kNegativeInfinity;  // ln of the sum of w_i |cot(p_i pi)| over p_i > 1/2
  double weight_sum = 0.0;
  for (std::size_t index = 0; index < log_p.size(); ++index) {
    const double weight = weights.empty() ? 1.0 : weights[index];
    if (!(weight >= 0.0) || !std::isfinite(weight))
      throw std::invalid_argument("cauchy_combination_log_p: weights must be finite and not negative");
    if (std::isnan(log_p[index]) || log_p[index] > 0.0)
      throw std::invalid_argument("cauchy_combination_log_p: ln p must be at most 0");
    if (weight == 0.0) continue;
    weight_sum += weight;
    const double value = log_p[index];
    if (value == kNegativeInfinity) {
      // p = 0 outright: T is infinite and so the combination's p is 0 too;
      // report the smallest positive double's log rather than -inf.
      return std::log(std::numeric_limits<double>::denorm_min());
    }
    if (value <= -std::log(2.0)) {
      log_positive = sets_detail::log_add(log_positive, std::log(weight) + log_cotangent_small(value));
    } else {
      // p_i = 1 would contribute -inf: it is taken as the double just below 1.
      const double complement = std::max(-std::expm1(value), std::numeric_limits<double>::epsilon() / 2.0);
      log_negative = sets_detail::log_add(log_negative, std::log(weight) + log_cotangent_small(std::log(complement)));
    }
  }
  if (weight_sum == 0.0) return 0.0;  // nothing to combine: p = 1
  const double log_weight_sum = std::log(weight_sum);
  if (log_positive > log_negative) {
    // T > 0: ln T = ln(P - N) - ln W.
    const double log_t = log_positive + std::log1p(-std::exp(log_negative - log_positive)) - log_weight_sum;
    if (log_t > std::log(1e150)) return -log_t - std::log(kPi);
    return std::log(std::atan(std::exp(-log_t)) / kPi);
  }
  if (log_positive == log_negative) return std::log(0.5);  // T = 0 (also when both sums are empty)
  // T < 0: p = 1/2 + arctan(|T|) / pi.
  const double log_abs_t = log_negative + std::log1p(-std::exp(log_positive - log_negative)) - log_weight_sum;
  if (log_abs_t > std::log(1e150)) return std::log1p(-std::exp(-log_abs_t) / kPi);
  return std::log(0.5 + std::atan(std::exp(log_abs_t)) / kPi);
}

}  // namespace tamis
