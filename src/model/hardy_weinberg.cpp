// Hardy-Weinberg exact test by the recurrence of Wigginton et al. (2005).
//
// Given N individuals and n_r copies of the rarer allele, the probability of
// h heterozygotes is proportional to 2^h / (n_rr! h! n_cc!), where
// n_rr = (n_r - h) / 2 and n_cc = N - h - n_rr. Neighbouring counts (h moves
// by 2, keeping its parity) are related by
//   P(h + 2) / P(h) = 4 n_rr n_cc / ((h + 1)(h + 2)),
// so the whole distribution follows from its mode without a factorial.
//
// The distribution is unimodal and concentrated in O(sqrt N) states around
// its mode, so the weights relative to the mode are summed on the linear
// scale, walking outwards until they are negligible: a scan calls this for
// every variant, and a walk over all N / 2 states in log space would cost
// more than the association test itself. When the observed count lies so far
// in the tail that its weight underflows, the weights are kept as logarithms
// instead, so p stays exact far below the smallest double.
#include "tamis/hardy_weinberg.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

namespace tamis {
namespace {

constexpr double kTieTolerance = 1e-7;
// Weights (relative to the mode) below this fraction of the smaller of 1 and
// the observed weight no longer change the sums at double precision: the
// weights fall faster than geometrically beyond it, and there are fewer than
// 2^53 of them.
constexpr double kNegligible = 1e-22;
// Below this observed weight the linear scale could underflow.
constexpr double kSmallestLinearWeight = 1e-250;

// The heterozygote counts of one site: state k has first_het + 2k of them.
struct HetStates {
  double individuals = 0.0;
  double rare_copies = 0.0;
  std::uint64_t first_het = 0;
  std::size_t count = 0;
  std::size_t mode = 0;
  std::size_t observed = 0;

  double het(std::size_t state) const { return static_cast<double>(first_het + 2 * state); }
  // P(state + 1) / P(state).
  double ratio_up(std::size_t state) const {
    const double h = het(state);
    const double rare_hom = (rare_copies - h) / 2.0;
    const double common_hom = individuals - h - rare_hom;
    return 4.0 * rare_hom * common_hom / ((h + 1.0) * (h + 2.0));
  }
  // P(state - 1) / P(state).
  double ratio_down(std::size_t state) const {
    const double h = het(state);
    const double rare_hom = (rare_copies - h) / 2.0;
    const double common_hom = individuals - h - rare_hom;
    return h * (h - 1.0) / (4.0 * (rare_hom + 1.0) * (common_hom + 1.0));
  }
};

HetStates het_states(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt) {
  HetStates states;
  const std::uint64_t rare_homs = std::min(hom_ref, hom_alt);
  const std::uint64_t rare_copies = 2 * rare_homs + het;
  states.individuals = static_cast<double>(hom_ref + het + hom_alt);
  states.rare_copies = static_cast<double>(rare_copies);
  states.first_het = rare_copies % 2;
  states.count = static_cast<std::size_t>((rare_copies - states.first_het) / 2 + 1);
  // Near the mode, h ~ n_r (2N - n_r) / (2N), with the right parity.
  const double n = states.individuals, n_r = states.rare_copies;
  const double mode_het = n_r * (2.0 * n - n_r) / (2.0 * n);
  states.mode = std::min(static_cast<std::size_t>(std::max(
                             0.0, std::floor((mode_het - static_cast<double>(states.first_het)) / 2.0))),
                         states.count - 1);
  states.observed = static_cast<std::size_t>((het - states.first_het) / 2);
  return states;
}

double log_add(double a, double b) {
  const double high = std::max(a, b);
  return high + std::log1p(std::exp(-std::fabs(a - b)));
}

// Every state's weight as a logarithm: exact however small p is.
double log_p_in_log_space(const HetStates& states) {
  std::vector<double> log_weight(states.count, 0.0);
  for (std::size_t state = states.mode; state + 1 < states.count; ++state) {
    log_weight[state + 1] = log_weight[state] + std::log(states.ratio_up(state));
  }
  for (std::size_t state = states.mode; state > 0; --state) {
    log_weight[state - 1] = log_weight[state] + std::log(states.ratio_down(state));
  }
  const double threshold = log_weight[states.observed] + std::log1p(kTieTolerance);
  double log_total = log_weight[0];
  double log_tail = log_weight[states.observed];
  for (std::size_t state = 1; state < states.count; ++state) log_total = log_add(log_total, log_weight[state]);
  for (std::size_t state = 0; state < states.count; ++state) {
    if (state != states.observed && log_weight[state] <= threshold) log_tail = log_add(log_tail, log_weight[state]);
  }
  return std::min(0.0, log_tail - log_total);
}

// The observed state's weight relative to the mode's, or 0 once it falls
// below kSmallestLinearWeight on the way there.
double observed_weight(const HetStates& states) {
  double weight = 1.0;
  for (std::size_t state = states.mode; state < states.observed; ++state) {
    weight *= states.ratio_up(state);
    if (weight < kSmallestLinearWeight) return 0.0;
  }
  for (std::size_t state = states.mode; state > states.observed; --state) {
    weight *= states.ratio_down(state);
    if (weight < kSmallestLinearWeight) return 0.0;
  }
  return weight;
}

struct WeightSums {
  double total = 0.0;
  double tail = 0.0;  // states no more likely than the observed one
};

// Adds the weights of the states from the mode outwards in one direction
// (the mode itself only when walking up) until they become negligible.
template <bool Up>
void add_weights_from_mode(const HetStates& states, double observed, WeightSums& sums) {
  const double threshold = observed * (1.0 + kTieTolerance);
  const double negligible = kNegligible * std::min(1.0, observed);
  double weight = 1.0;
  std::size_t state = states.mode;
  if (Up) {
    sums.total += weight;
    if (weight <= threshold || state == states.observed) sums.tail += weight;
  }
  while (Up ? state + 1 < states.count : state > 0) {
    weight *= Up ? states.ratio_up(state) : states.ratio_down(state);
    state = Up ? state + 1 : state - 1;
    sums.total += weight;
    if (weight <= threshold || state == states.observed) sums.tail += weight;
    const bool past_observed = Up ? state >= states.observed : state <= states.observed;
    if (weight < negligible && past_observed) break;
  }
}

}  // namespace

double hardy_weinberg_exact_log_p(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt) {
  if (hom_ref + het + hom_alt == 0) return 0.0;
  const HetStates states = het_states(hom_ref, het, hom_alt);
  const double observed = observed_weight(states);
  if (observed == 0.0) return log_p_in_log_space(states);
  WeightSums sums;
  add_weights_from_mode<true>(states, observed, sums);
  add_weights_from_mode<false>(states, observed, sums);
  return std::min(0.0, std::log(sums.tail / sums.total));
}

double hardy_weinberg_exact_p(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt) {
  return std::exp(hardy_weinberg_exact_log_p(hom_ref, het, hom_alt));
}

}  // namespace tamis
