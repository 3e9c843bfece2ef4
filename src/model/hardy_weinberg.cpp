// Hardy-Weinberg exact test by the recurrence of Wigginton et al. (2005).
//
// Given N individuals and n_r copies of the rarer allele, the probability of
// h heterozygotes is proportional to 2^h / (n_rr! h! n_cc!), where
// n_rr = (n_r - h) / 2 and n_cc = N - h - n_rr. Neighbouring counts (h moves
// by 2, keeping its parity) are related by
//   P(h + 2) / P(h) = 4 n_rr n_cc / ((h + 1)(h + 2)),
// so the whole distribution follows from its mode without a factorial. The
// relative probabilities are kept as logarithms, so nothing overflows or
// underflows however far the observed count lies in the tail.
#include "tamis/hardy_weinberg.hpp"

#include <algorithm>
#include <cmath>
#include <vector>

namespace tamis {
namespace {

constexpr double kTieTolerance = 1e-7;

double log_add(double a, double b) {
  const double high = std::max(a, b);
  return high + std::log1p(std::exp(-std::fabs(a - b)));
}

}  // namespace

double hardy_weinberg_exact_log_p(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt) {
  const std::uint64_t individuals = hom_ref + het + hom_alt;
  if (individuals == 0) return 0.0;
  const std::uint64_t rare_homs = std::min(hom_ref, hom_alt);
  const std::uint64_t rare_copies = 2 * rare_homs + het;
  const std::uint64_t first_het = rare_copies % 2;  // heterozygote counts share this parity
  const std::size_t states = static_cast<std::size_t>((rare_copies - first_het) / 2 + 1);
  const auto het_at = [&](std::size_t state_idx) { return first_het + 2 * state_idx; };

  // Start near the mode, h ~ n_r (2N - n_r) / (2N), with the right parity.
  const double n = static_cast<double>(individuals);
  const double n_r = static_cast<double>(rare_copies);
  std::size_t mode_idx = static_cast<std::size_t>(
      std::max(0.0, std::floor((n_r * (2.0 * n - n_r) / (2.0 * n) - static_cast<double>(first_het)) / 2.0)));
  mode_idx = std::min(mode_idx, states - 1);

  std::vector<double> log_weight(states, 0.0);
  for (std::size_t state_idx = mode_idx; state_idx + 1 < states; ++state_idx) {
    const double h = static_cast<double>(het_at(state_idx));
    const double rare_hom = (n_r - h) / 2.0;
    const double common_hom = n - h - rare_hom;
    log_weight[state_idx + 1] = log_weight[state_idx] + std::log(4.0 * rare_hom * common_hom) -
                                std::log((h + 1.0) * (h + 2.0));
  }
  for (std::size_t state_idx = mode_idx; state_idx > 0; --state_idx) {
    const double h = static_cast<double>(het_at(state_idx));
    const double rare_hom = (n_r - h) / 2.0;
    const double common_hom = n - h - rare_hom;
    log_weight[state_idx - 1] = log_weight[state_idx] + std::log(h * (h - 1.0)) -
                                std::log(4.0 * (rare_hom + 1.0) * (common_hom + 1.0));
  }

  const std::size_t observed_idx = static_cast<std::size_t>((het - first_het) / 2);
  const double threshold = log_weight[observed_idx] + std::log1p(kTieTolerance);
  double log_total = log_weight[0];
  double log_tail = log_weight[observed_idx];
  for (std::size_t state_idx = 1; state_idx < states; ++state_idx) {
    log_total = log_add(log_total, log_weight[state_idx]);
  }
  for (std::size_t state_idx = 0; state_idx < states; ++state_idx) {
    if (state_idx != observed_idx && log_weight[state_idx] <= threshold) {
      log_tail = log_add(log_tail, log_weight[state_idx]);
    }
  }
  return std::min(0.0, log_tail - log_total);
}

double hardy_weinberg_exact_p(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt) {
  return std::exp(hardy_weinberg_exact_log_p(hom_ref, het, hom_alt));
}

}  // namespace tamis
