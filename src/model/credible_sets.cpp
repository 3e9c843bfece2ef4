#include "tamis/credible_sets.hpp"

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <stdexcept>

namespace tamis {
namespace {

bool is_usable(const CredibleEvidence& entry) {
  return std::isfinite(entry.beta) && std::isfinite(entry.standard_error) &&
         entry.standard_error > 0.0;
}

// ln BF = -1/2 ln(1 + W/V) + z^2/2 * W/(V + W); log1p keeps precision when
// the SE is large next to the prior (BF close to 1).
double log_bayes_factor(const CredibleEvidence& entry, double prior_variance) {
  const double variance = entry.standard_error * entry.standard_error;
  const double z_squared = (entry.beta / entry.standard_error) * (entry.beta / entry.standard_error);
  const double shrinkage = prior_variance / (variance + prior_variance);
  return -0.5 * std::log1p(prior_variance / variance) + 0.5 * z_squared * shrinkage;
}

// Usable entries by decreasing value, equal values in input order.
std::vector<std::size_t> rank_usable(const std::vector<std::size_t>& usable,
                                     const std::vector<double>& values) {
  std::vector<std::size_t> order = usable;
  std::stable_sort(order.begin(), order.end(),
                   [&](std::size_t left, std::size_t right) { return values[left] > values[right]; });
  return order;
}

// ln of the sum of exp(log_values), summed from the largest term down: the
// order of the input then changes no bit of the result.
double log_sum_exp(const std::vector<double>& log_values, const std::vector<std::size_t>& descending) {
  const double largest = log_values[descending.front()];
  double sum = 0.0;
  for (std::size_t index : descending) sum += std::exp(log_values[index] - largest);
  return largest + std::log(sum);
}

}  // namespace

CredibleSet credible_set(const std::vector<CredibleEvidence>& evidence, double prior_effect_sd) {
  if (!std::isfinite(prior_effect_sd) || prior_effect_sd <= 0.0) {
    throw std::invalid_argument("credible_set: the prior effect SD must be finite and positive");
  }
  const double prior_variance = prior_effect_sd * prior_effect_sd;
  const std::size_t count = evidence.size();

  std::vector<std::size_t> usable;
  std::vector<double> log_bf(count, std::numeric_limits<double>::quiet_NaN());
  for (std::size_t index = 0; index < count; ++index) {
    if (!is_usable(evidence[index])) continue;
    const double value = log_bayes_factor(evidence[index], prior_variance);
    if (!std::isfinite(value)) continue;  // z^2 overflowed: an SE below 1e-150 or so
    usable.push_back(index);
    log_bf[index] = value;
  }

  CredibleSet result;
  result.members.assign(count, CredibleMember{std::numeric_limits<double>::quiet_NaN(), 0.0, false, false});
  if (usable.empty()) {
    result.size_95 = result.size_99 = 0;
    return result;
  }
  const double log_total = log_sum_exp(log_bf, rank_usable(usable, log_bf));
  std::vector<double> pips(count, 0.0);
  for (std::size_t index : usable) {
    pips[index] = std::exp(log_bf[index] - log_total);
    result.members[index].log10_bayes_factor = log_bf[index] / std::log(10.0);
    result.members[index].pip = pips[index];
  }

  result.size_95 = credible_set_size(result.members, 0.95);
  result.size_99 = credible_set_size(result.members, 0.99);
  // Distinct log BFs can round to equal PIPs, so membership follows the PIPs.
  const std::vector<std::size_t> by_pip = rank_usable(usable, pips);
  for (std::size_t rank = 0; rank < by_pip.size(); ++rank) {
    result.members[by_pip[rank]].in_95 = rank < result.size_95;
    result.members[by_pip[rank]].in_99 = rank < result.size_99;
  }
  return result;
}

std::size_t credible_set_size(const std::vector<CredibleMember>& members, double level) {
  if (!(level > 0.0 && level <= 1.0)) {
    throw std::invalid_argument("credible_set_size: the level must lie in (0, 1]");
  }
  std::vector<double> pips;
  pips.reserve(members.size());
  for (const CredibleMember& member : members) {
    if (std::isfinite(member.log10_bayes_factor)) pips.push_back(member.pip);
  }
  std::sort(pips.begin(), pips.end(), std::greater<double>());
  double cumulative = 0.0;
  for (std::size_t taken = 0; taken < pips.size(); ++taken) {
    cumulative += pips[taken];
    if (cumulative >= level) return taken + 1;
  }
  return pips.size();
}

double default_prior_effect_sd(bool binary_trait, double trait_sd) {
  if (binary_trait) return 0.2;
  if (!std::isfinite(trait_sd) || trait_sd <= 0.0) {
    throw std::invalid_argument("default_prior_effect_sd: the trait SD must be finite and positive");
  }
  return 0.15 * trait_sd;
}

}  // namespace tamis
