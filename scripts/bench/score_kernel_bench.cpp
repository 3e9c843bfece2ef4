// The blocked score kernel against the same computation one variant at a
// time (width-1 calls), in samples x variants per second.
#include <benchmark/benchmark.h>

#include <Eigen/Dense>
#include <random>
#include <string>
#include <vector>

#include "tamis/null_model.hpp"
#include "tamis/score_kernel.hpp"

namespace {

constexpr int kCovariates = 7;  // as in the scan the targets are measured on
constexpr std::size_t kVariants = 128;

struct KernelSetup {
  tamis::NullModel model;
  std::vector<double> sample_major;   // genotypes[s * kVariants + j], for one blocked call
  std::vector<double> variant_major;  // genotypes[j * n + s], one column per width-1 call
};

KernelSetup make_setup(int sample_count) {
  std::mt19937_64 random(7);
  std::normal_distribution<double> normal;
  Eigen::MatrixXd design(sample_count, kCovariates + 1);
  Eigen::VectorXd trait(sample_count);
  for (int sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
    design(sample_idx, 0) = 1.0;
    for (int column = 1; column <= kCovariates; ++column) design(sample_idx, column) = normal(random);
    trait[sample_idx] = 0.3 * design(sample_idx, 1) + normal(random);
  }
  std::vector<std::string> names = {"intercept"};
  for (int column = 1; column <= kCovariates; ++column) names.push_back("c" + std::to_string(column));
  KernelSetup setup{tamis::fit_null_model("bench", tamis::TraitKind::quantitative, trait, design, names), {}, {}};
  setup.sample_major.resize(static_cast<std::size_t>(sample_count) * kVariants);
  setup.variant_major.resize(setup.sample_major.size());
  std::uniform_int_distribution<int> dosage(0, 2);
  for (int sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
    for (std::size_t variant_idx = 0; variant_idx < kVariants; ++variant_idx) {
      const double value = dosage(random);
      setup.sample_major[sample_idx * kVariants + variant_idx] = value;
      setup.variant_major[variant_idx * sample_count + sample_idx] = value;
    }
  }
  return setup;
}

void report_rate(benchmark::State& state, int sample_count) {
  state.SetItemsProcessed(static_cast<std::int64_t>(state.iterations()) * sample_count *
                          static_cast<std::int64_t>(kVariants));
  state.counters["samples"] = sample_count;
  state.counters["variants"] = kVariants;
}

void blocked_kernel(benchmark::State& state) {
  const int sample_count = static_cast<int>(state.range(0));
  const KernelSetup setup = make_setup(sample_count);
  const tamis::ScoreKernel kernel(setup.model);
  tamis::ScoreScratch scratch;
  std::vector<tamis::ScoreResult> results(kVariants);
  for (auto _ : state) {
    kernel.compute(setup.sample_major.data(), kVariants, scratch, results.data());
    benchmark::DoNotOptimize(results.data());
  }
  report_rate(state, sample_count);
}

void one_variant_at_a_time(benchmark::State& state) {
  const int sample_count = static_cast<int>(state.range(0));
  const KernelSetup setup = make_setup(sample_count);
  const tamis::ScoreKernel kernel(setup.model);
  tamis::ScoreScratch scratch;
  std::vector<tamis::ScoreResult> results(kVariants);
  for (auto _ : state) {
    for (std::size_t variant_idx = 0; variant_idx < kVariants; ++variant_idx) {
      kernel.compute(setup.variant_major.data() + variant_idx * sample_count, 1, scratch,
                     results.data() + variant_idx);
    }
    benchmark::DoNotOptimize(results.data());
  }
  report_rate(state, sample_count);
}

BENCHMARK(blocked_kernel)->Arg(1000)->Arg(5000)->Unit(benchmark::kMicrosecond);
BENCHMARK(one_variant_at_a_time)->Arg(1000)->Arg(5000)->Unit(benchmark::kMicrosecond);

}  // namespace

BENCHMARK_MAIN();
