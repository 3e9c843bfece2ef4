// The REML null fit of the linear mixed model (MixedModel::fit: REML and ML
// of h2) on a cohort of 50,000 samples, 30% of them in families of 2 to 6
// whose relatedness comes from their pedigrees (0.5 parent-offspring and
// full siblings, 0.25 half-siblings, 0.125 first cousins), 5 covariates
// plus the intercept, one thread. Also the cost of one confirmation refit,
// and of whitening one block of dosages (the scan's width at this sample
// count) beside the score kernel's cost for the same block.
//
// Build: cmake -B build-bench -DTAMIS_BUILD_BENCH=ON && cmake --build build-bench --target mixed_model_bench
// Run:   build-bench/scripts/bench/mixed_model_bench [SAMPLES] [ROUNDS] [linked]
// Prints the median wall time of ROUNDS fits (default 5). With `linked`,
// consecutive families are joined by one pair of 0.0625 (second cousins),
// so that all related samples form one component, which is then factored by
// the sparse Cholesky at each h2. Run it on an otherwise idle machine: the
// figures are wall times.
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <random>
#include <string>
#include <vector>

#include "tamis/mixed_model.hpp"
#include "tamis/score_kernel.hpp"

namespace {

class Random {
 public:
  explicit Random(std::uint64_t seed) : engine_(seed) {}
  double uniform() { return (static_cast<double>(engine_() >> 11) + 0.5) * 0x1.0p-53; }
  double normal() { return std::sqrt(-2.0 * std::log(uniform())) * std::cos(6.283185307179586 * uniform()); }
  int below(int count) { return static_cast<int>(uniform() * count); }

 private:
  std::mt19937_64 engine_;
};

// A small pedigree: parents before children (-1 for a founder's parents);
// only the sampled members enter the cohort.
struct Person {
  int father = -1;
  int mother = -1;
  bool sampled = true;
};

// The numerator relationship matrix of a pedigree by the tabular method:
// A_jj = 1 + A_fm / 2 and A_ij = (A_if + A_im) / 2 for i before j.
std::vector<std::vector<double>> relationship_matrix(const std::vector<Person>& people) {
  const std::size_t count = people.size();
  std::vector<std::vector<double>> a(count, std::vector<double>(count, 0.0));
  auto entry = [&](int i, int j) { return i < 0 || j < 0 ? 0.0 : a[static_cast<std::size_t>(i)][static_cast<std::size_t>(j)]; };
  for (std::size_t person_idx = 0; person_idx < count; ++person_idx) {
    const Person& person = people[person_idx];
    a[person_idx][person_idx] = 1.0 + 0.5 * entry(person.father, person.mother);
    for (std::size_t earlier = 0; earlier < person_idx; ++earlier) {
      const int other = static_cast<int>(earlier);
      const double value = 0.5 * (entry(other, person.father) + entry(other, person.mother));
      a[person_idx][earlier] = a[earlier][person_idx] = value;
    }
  }
  return a;
}

// One family of 2 to 6 sampled members, from one of several pedigree shapes.
std::vector<Person> draw_family(Random& random) {
  std::vector<Person> people;
  auto add = [&](int father, int mother, bool sampled) {
    people.push_back({father, mother, sampled});
    return static_cast<int>(people.size()) - 1;
  };
  switch (random.below(5)) {
    case 0: {  // full siblings, parents not sampled
      const int father = add(-1, -1, false), mother = add(-1, -1, false);
      const int children = 2 + random.below(3);
      for (int kid = 0; kid < children; ++kid) add(father, mother, true);
      break;
    }
    case 1: {  // a nuclear family: both parents and 1 to 4 children
      const int father = add(-1, -1, true), mother = add(-1, -1, true);
      const int children = 1 + random.below(4);
      for (int kid = 0; kid < children; ++kid) add(father, mother, true);
      break;
    }
    case 2: {  // half-siblings
      const int father = add(-1, -1, false), first_mother = add(-1, -1, false), second_mother = add(-1, -1, false);
      add(father, first_mother, true);
      add(father, second_mother, true);
      break;
    }
    case 3: {  // a parent and child, and first cousins of the child
      const int grandfather = add(-1, -1, false), grandmother = add(-1, -1, false);
      const int parent = add(grandfather, grandmother, true), aunt = add(grandfather, grandmother, false);
      const int spouse = add(-1, -1, false), aunt_spouse = add(-1, -1, false);
      add(parent, spouse, true);
      const int cousins = 1 + random.below(3);
      for (int cousin = 0; cousin < cousins; ++cousin) add(aunt_spouse, aunt, true);
      break;
    }
    default: {  // a sibship with a half-sibling and a first cousin
      const int grandfather = add(-1, -1, false), grandmother = add(-1, -1, false);
      const int parent = add(grandfather, grandmother, false), uncle = add(grandfather, grandmother, false);
      const int spouse = add(-1, -1, false), second_spouse = add(-1, -1, false), uncle_spouse = add(-1, -1, false);
      const int children = 2 + random.below(3);
      for (int kid = 0; kid < children; ++kid) add(parent, spouse, true);
      add(parent, second_spouse, true);
      add(uncle, uncle_spouse, true);
      break;
    }
  }
  return people;
}

double seconds_since(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

double median(std::vector<double> values) {
  std::sort(values.begin(), values.end());
  return values[values.size() / 2];
}

// The scan's block width at this sample count (src/scan/scan.cpp: 1 MiB of
// doubles, 8 to 256 variants), whitened and then tested, 200 times each.
void time_block_whitening(const tamis::MixedModel& model, const Eigen::VectorXd& y, const Eigen::MatrixXd& design) {
  const std::size_t n = static_cast<std::size_t>(y.size());
  const std::size_t width = std::clamp<std::size_t>((std::size_t{1} << 20) / (8 * n) / 8 * 8, 8, 256);
  const tamis::NullModel whitened = tamis::fit_null_model("bench", tamis::TraitKind::quantitative, model.whiten(y),
                                                          model.whiten(design), std::vector<std::string>(
                                                              static_cast<std::size_t>(design.cols()), "x"));
  Random random(7);
  std::vector<double> dosages(n * width), block;
  for (double& dosage : dosages) dosage = random.below(3);
  std::vector<std::size_t> identity(n);
  for (std::size_t sample = 0; sample < n; ++sample) identity[sample] = sample;
  tamis::ScoreKernel kernel(whitened);
  tamis::ScoreScratch scratch;
  std::vector<tamis::ScoreResult> results(width);
  std::vector<double> whiten_seconds, kernel_seconds;
  for (int round = 0; round < 200; ++round) {
    block = dosages;
    auto start = std::chrono::steady_clock::now();
    model.whiten_block(block.data(), width, identity);
    whiten_seconds.push_back(seconds_since(start));
    start = std::chrono::steady_clock::now();
    kernel.compute(block.data(), width, scratch, results.data());
    kernel_seconds.push_back(seconds_since(start));
  }
  std::printf("block of %zu variants: whiten_block median %.3f ms, score kernel median %.3f ms\n", width,
              1e3 * median(whiten_seconds), 1e3 * median(kernel_seconds));
}

}  // namespace

int main(int argc, char** argv) {
  const std::size_t samples = argc > 1 ? std::strtoul(argv[1], nullptr, 10) : 50000;
  const int rounds = argc > 2 ? std::atoi(argv[2]) : 5;
  const bool linked = argc > 3 && std::string(argv[3]) == "linked";
  Random random(20260303);

  tamis::SparseRelatedness relatedness;
  std::vector<int> family_of;
  std::size_t in_families = 0, family_count = 0;
  while (in_families < samples * 3 / 10) {
    const std::vector<Person> people = draw_family(random);
    const auto a = relationship_matrix(people);
    std::vector<std::size_t> sampled;
    for (std::size_t person_idx = 0; person_idx < people.size(); ++person_idx)
      if (people[person_idx].sampled) sampled.push_back(person_idx);
    const auto base = static_cast<std::uint32_t>(relatedness.diagonal.size());
    for (std::size_t first = 0; first < sampled.size(); ++first) {
      relatedness.diagonal.push_back(a[sampled[first]][sampled[first]]);
      family_of.push_back(static_cast<int>(family_count));
      for (std::size_t second = first + 1; second < sampled.size(); ++second) {
        const double value = a[sampled[first]][sampled[second]];
        if (value > 0.0) {
          relatedness.pairs.push_back({base + static_cast<std::uint32_t>(first), base + static_cast<std::uint32_t>(second), value});
        }
      }
    }
    if (linked && base > 0) relatedness.pairs.push_back({base - 1, base, 0.0625});
    in_families += sampled.size();
    ++family_count;
  }
  while (relatedness.diagonal.size() < samples) {
    relatedness.diagonal.push_back(1.0);
    family_of.push_back(-1);
  }
  relatedness.sample_count = relatedness.diagonal.size();
  const auto n = static_cast<Eigen::Index>(relatedness.sample_count);

  constexpr int kCovariates = 5;
  Eigen::MatrixXd design(n, kCovariates + 1);
  Eigen::VectorXd y(n);
  std::vector<double> family_effect(family_count);
  for (double& effect : family_effect) effect = random.normal();
  for (Eigen::Index sample = 0; sample < n; ++sample) {
    design(sample, 0) = 1.0;
    for (int covariate = 1; covariate <= kCovariates; ++covariate) design(sample, covariate) = random.normal();
    const int family = family_of[static_cast<std::size_t>(sample)];
    y[sample] = 0.3 * design(sample, 1) + (family >= 0 ? family_effect[static_cast<std::size_t>(family)] : random.normal()) +
                random.normal();
  }

  std::vector<double> fit_seconds;
  tamis::VarianceComponents reml;
  for (int round = 0; round < rounds; ++round) {
    const auto start = std::chrono::steady_clock::now();
    const tamis::MixedModel model = tamis::MixedModel::fit(y, design, relatedness);
    fit_seconds.push_back(seconds_since(start));
    reml = model.reml();
    if (round == rounds - 1) {
      std::vector<double> confirm_seconds;
      for (int variant = 0; variant < 9; ++variant) {
        Eigen::VectorXd genotype(n);
        for (Eigen::Index sample = 0; sample < n; ++sample) genotype[sample] = random.below(3);
        const auto confirm_start = std::chrono::steady_clock::now();
        (void)model.confirm(genotype);
        confirm_seconds.push_back(seconds_since(confirm_start));
      }
      std::printf("confirmation refit (ML, h2 re-estimated): median %.3f s\n", median(confirm_seconds));
      time_block_whitening(model, y, design);
    }
  }
  std::printf("samples %zu, in %zu families: %zu%s, related pairs %zu, covariates %d + intercept\n",
              relatedness.sample_count, family_count, in_families, linked ? " (linked into one component)" : "",
              relatedness.pairs.size(), kCovariates);
  std::printf("REML h2 %.6f (%d evaluations), ML h2 evaluated as well\n", reml.h2, reml.iterations);
  std::printf("MixedModel::fit (REML + ML null fits), one thread: median of %d rounds %.3f s\n", rounds,
              median(fit_seconds));
  return 0;
}
