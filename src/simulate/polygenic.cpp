#include "polygenic.hpp"

#include <cmath>

namespace tamis::simulation {
namespace {

constexpr std::uint64_t kPolygenicStream = 2;
constexpr int kHiddenLoci = 1000;

// One hidden locus: founders draw their alleles from its frequency, children
// take one of each parent's two alleles.
void draw_locus(const Cohort& cohort, double frequency, Random& random, std::vector<std::array<std::uint8_t, 2>>& alleles) {
  for (std::size_t person_idx = 0; person_idx < cohort.people.size(); ++person_idx) {
    const Person& person = cohort.people[person_idx];
    auto& own = alleles[person_idx];
    if (person.is_founder()) {
      own = {random.bernoulli(frequency), random.bernoulli(frequency)};
    } else {
      own = {alleles[static_cast<std::size_t>(person.father)][random.index(2)],
             alleles[static_cast<std::size_t>(person.mother)][random.index(2)]};
    }
  }
}

void standardise(std::vector<std::array<double, 2>>& values, int trait) {
  double mean = 0.0;
  for (const auto& value : values) mean += value[trait];
  mean /= static_cast<double>(values.size());
  double sum_squares = 0.0;
  for (const auto& value : values) sum_squares += (value[trait] - mean) * (value[trait] - mean);
  const double sd = std::sqrt(sum_squares / static_cast<double>(values.size()));
  for (auto& value : values) value[trait] = sd > 0.0 ? (value[trait] - mean) / sd : 0.0;
}

}  // namespace

std::vector<std::array<double, 2>> draw_genetic_values(const Cohort& cohort, std::uint64_t seed) {
  Random random(stream_seed(seed, kPolygenicStream));
  std::vector<std::array<std::uint8_t, 2>> alleles(cohort.people.size());
  std::vector<std::array<double, 2>> values(cohort.samples.size(), std::array<double, 2>{0.0, 0.0});
  for (int locus_idx = 0; locus_idx < kHiddenLoci; ++locus_idx) {
    const double frequency = random.uniform(0.05, 0.5);
    // Effects per standardised genotype, independent between the two traits.
    const double scale = 1.0 / std::sqrt(2.0 * frequency * (1.0 - frequency));
    const double effects[2] = {scale * random.normal(), scale * random.normal()};
    draw_locus(cohort, frequency, random, alleles);
    for (std::size_t sample_idx = 0; sample_idx < cohort.samples.size(); ++sample_idx) {
      const auto& own = alleles[cohort.samples[sample_idx]];
      const int count = own[0] + own[1];
      for (int trait = 0; trait < 2; ++trait) values[sample_idx][trait] += effects[trait] * count;
    }
  }
  for (int trait = 0; trait < 2; ++trait) standardise(values, trait);
  return values;
}

}  // namespace tamis::simulation
