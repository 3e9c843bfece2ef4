// Tests of the credible sets (src/model/credible_sets.cpp): Wakefield's
// approximate Bayes factors and the posterior inclusion probabilities against
// R 4.2.2 (tests/reference/credible_sets_reference.R prints every constant
// used below), and their properties.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <iostream>
#include <limits>
#include <numeric>
#include <random>
#include <stdexcept>
#include <string>
#include <vector>

#include "tamis/credible_sets.hpp"

namespace tamis {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr double kInf = std::numeric_limits<double>::infinity();

struct ReferenceCase {
  std::string name;
  double prior_sd;
  std::vector<double> beta, se, log10_bf, pip;
  std::vector<int> in_95, in_99;
};

// R 4.2.2: log BF = dnorm(beta, 0, sqrt(V + W), log = TRUE) - dnorm(beta, 0,
// sqrt(V), log = TRUE), checked there against Wakefield's closed form where it
// does not overflow; PIP = BF / sum(BF); sets from order(-pip) and cumsum.
const std::vector<ReferenceCase>& reference_cases() {
  static const std::vector<ReferenceCase> cases = {
    {"logistic", 0.2,
     {0.31, 0.28999999999999998, 0.12, -0.050000000000000003, 0.27000000000000002,
      0.27000000000000002, 0.02, 0.33000000000000002, 0.40000000000000002,
      0.10000000000000001, 0.20000000000000001, 0.29999999999999999},
     {0.050000000000000003, 0.050000000000000003, 0.059999999999999998, 0.070000000000000007,
      0.050999999999999997, 0.050999999999999997, 0.20000000000000001, 0.059999999999999998,
      0, -0.10000000000000001, kInf, kNaN},
     {7.2409072495983899, 6.2599126551816324, 0.25527861474614288, -0.38232632545507617,
      5.1074057058253306, 5.1074057058253306, -0.14942926162723244, 5.4847419862875944, kNaN,
      kNaN, kNaN, kNaN},
     {0.87972971396737132, 0.091908285921453017, 9.0932813008392966e-08, 2.09467035326306e-08,
      0.0064691573890732082, 0.0064691573890732082, 3.5810695009781551e-08,
      0.015423537642817686, 0, 0, 0, 0},
     {1, 1, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0},
     {1, 1, 0, 0, 1, 0, 0, 1, 0, 0, 0, 0}},
    {"strong", 0.12,
     {0.90000000000000002, 0.89900000000000002, 0.59999999999999998, -0.29999999999999999,
      0.050000000000000003, 0.75, 0.69999999999999996, 0.20000000000000001,
      -0.59999999999999998, 0.89700000000000002},
     {0.014999999999999999, 0.014999999999999999, 0.02, 0.029999999999999999,
      0.040000000000000001, 0.012500000000000001, 0.02, 0.10000000000000001, 0.01,
      0.014999999999999999},
     {768.79699432559573, 767.08749246342768, 189.36645607939028, 19.8221629229933,
      -0.19463669241177589, 772.3541896178042, 258.0319349749044, 0.31891496710988332,
      775.25814158041953, 763.67419024613628},
     {3.4539109657126909e-07, 6.7423186825983011e-09, 0, 0, 0, 0.0012459666856514851, 0, 0,
      0.99875368117833008, 2.6031971417763154e-12},
     {0, 0, 0, 0, 0, 0, 0, 0, 1, 0},
     {0, 0, 0, 0, 0, 0, 0, 0, 1, 0}},
    {"weak", 0.2,
     {0.050000000000000003, -0.080000000000000002, 0.11, 0.02, 0.089999999999999997, -0.12,
      0.070000000000000007, 0, 0.040000000000000001, -0.059999999999999998},
     {0.050000000000000003, 0.050000000000000003, 0.050000000000000003, 0.059999999999999998,
      0.050000000000000003, 0.055, 0.050000000000000003, 0.050000000000000003,
      0.070000000000000007, 0.050000000000000003},
     {-0.41085058685231263, -0.092027343666866684, 0.37394508868109283, -0.51945669955629392,
      0.046946890542173825, 0.38451807906277619, -0.21465166796896101, -0.61522446068913694,
      -0.41785789526671446, -0.3209260823641098},
     {0.04259534977500723, 0.088753488459116903, 0.25951225077276463, 0.033170809955832284,
      0.1222248931387208, 0.26590766399391613, 0.06692079748166184, 0.026606534720788194,
      0.041913591894214876, 0.052394619807977043},
     {1, 1, 1, 1, 1, 1, 1, 0, 1, 1},
     {1, 1, 1, 1, 1, 1, 1, 1, 1, 1}},
  };
  return cases;
}

double relative_error(double got, double want) {
  if (want == 0.0) return std::fabs(got);
  return std::fabs(got - want) / std::fabs(want);
}

std::vector<CredibleEvidence> evidence_of(const ReferenceCase& reference) {
  std::vector<CredibleEvidence> evidence;
  for (std::size_t index = 0; index < reference.beta.size(); ++index) {
    evidence.push_back({reference.beta[index], reference.se[index]});
  }
  return evidence;
}

TEST(CredibleSets, BayesFactorsPipsAndMembershipEqualR) {
  double worst_bf = 0.0, worst_pip = 0.0;
  for (const ReferenceCase& reference : reference_cases()) {
    const CredibleSet result = credible_set(evidence_of(reference), reference.prior_sd);
    ASSERT_EQ(result.members.size(), reference.beta.size());
    for (std::size_t index = 0; index < reference.beta.size(); ++index) {
      const CredibleMember& member = result.members[index];
      const std::string where = reference.name + " entry " + std::to_string(index + 1);
      if (std::isnan(reference.log10_bf[index])) {
        EXPECT_TRUE(std::isnan(member.log10_bayes_factor)) << where;
      } else {
        const double bf_error = relative_error(member.log10_bayes_factor, reference.log10_bf[index]);
        worst_bf = std::max(worst_bf, bf_error);
        EXPECT_LE(bf_error, 1e-10) << where;  // R 4.2.2 stats::dnorm, log scale
      }
      const double pip_error = relative_error(member.pip, reference.pip[index]);
      worst_pip = std::max(worst_pip, pip_error);
      EXPECT_LE(pip_error, 1e-10) << where;  // R 4.2.2, BF / sum(BF)
      EXPECT_EQ(member.in_95, reference.in_95[index] == 1) << where;  // R 4.2.2 order/cumsum
      EXPECT_EQ(member.in_99, reference.in_99[index] == 1) << where;
    }
    EXPECT_EQ(result.size_95, static_cast<std::size_t>(
        std::count(reference.in_95.begin(), reference.in_95.end(), 1))) << reference.name;
    EXPECT_EQ(result.size_99, static_cast<std::size_t>(
        std::count(reference.in_99.begin(), reference.in_99.end(), 1))) << reference.name;
  }
  std::cout << "[ accuracy ] max relative error against R 4.2.2: log10 BF " << worst_bf
            << ", PIP " << worst_pip << "\n";
}

// Random evidence for the properties: effects around a few strong signals and
// many weak ones, SEs of realistic spread.
std::vector<CredibleEvidence> random_evidence(std::mt19937_64& generator, std::size_t count,
                                              double strength) {
  std::uniform_real_distribution<double> uniform(0.0, 1.0);
  std::vector<CredibleEvidence> evidence;
  for (std::size_t index = 0; index < count; ++index) {
    const double se = 0.01 + 0.1 * uniform(generator);
    const double z = strength * uniform(generator) * (uniform(generator) < 0.5 ? -1.0 : 1.0);
    evidence.push_back({z * se, se});
  }
  return evidence;
}

TEST(CredibleSets, PipsSumToOne) {
  std::mt19937_64 generator(17);
  for (double strength : {0.5, 3.0, 8.0, 60.0}) {
    for (std::size_t count : {1u, 2u, 10u, 300u}) {
      const CredibleSet result = credible_set(random_evidence(generator, count, strength), 0.2);
      double sum = 0.0;
      for (const CredibleMember& member : result.members) sum += member.pip;
      EXPECT_NEAR(sum, 1.0, 1e-12) << "strength " << strength << ", " << count << " variants";
    }
  }
}

TEST(CredibleSets, DoNotDependOnTheInputOrder) {
  std::mt19937_64 generator(29);
  for (double strength : {1.0, 5.0, 40.0}) {
    const std::vector<CredibleEvidence> evidence = random_evidence(generator, 200, strength);
    const CredibleSet original = credible_set(evidence, 0.15);
    std::vector<std::size_t> permutation(evidence.size());
    std::iota(permutation.begin(), permutation.end(), 0);
    std::shuffle(permutation.begin(), permutation.end(), generator);
    std::vector<CredibleEvidence> shuffled;
    for (std::size_t index : permutation) shuffled.push_back(evidence[index]);
    const CredibleSet reordered = credible_set(shuffled, 0.15);
    EXPECT_EQ(reordered.size_95, original.size_95);
    EXPECT_EQ(reordered.size_99, original.size_99);
    for (std::size_t position = 0; position < permutation.size(); ++position) {
      const CredibleMember& moved = reordered.members[position];
      const CredibleMember& before = original.members[permutation[position]];
      EXPECT_EQ(moved.pip, before.pip);  // the sum runs from the largest BF down: same bits
      EXPECT_EQ(moved.log10_bayes_factor, before.log10_bayes_factor);
      EXPECT_EQ(moved.in_95, before.in_95);
      EXPECT_EQ(moved.in_99, before.in_99);
    }
  }
}

TEST(CredibleSets, SizeGrowsWithTheLevelAndSetsAreSmallest) {
  std::mt19937_64 generator(41);
  for (double strength : {0.5, 2.0, 6.0}) {
    const CredibleSet result = credible_set(random_evidence(generator, 150, strength), 0.2);
    std::size_t previous = 0;
    for (int step = 1; step <= 100; ++step) {
      const std::size_t size = credible_set_size(result.members, step / 100.0);
      EXPECT_GE(size, previous) << "level " << step / 100.0;
      previous = size;
    }
    EXPECT_LE(result.size_95, result.size_99);
    double covered = 0.0, smallest_member = 1.0;
    for (const CredibleMember& member : result.members) {
      if (member.in_95) {
        EXPECT_TRUE(member.in_99);  // the sets are nested
        covered += member.pip;
        smallest_member = std::min(smallest_member, member.pip);
      }
    }
    EXPECT_GE(covered, 0.95);
    EXPECT_LT(covered - smallest_member, 0.95);  // one member fewer would not reach the level
  }
}

TEST(CredibleSets, UnusableEvidenceIsNeverAMember) {
  const std::vector<CredibleEvidence> evidence = {
      {0.5, 0.05}, {0.4, 0.0}, {0.4, -0.05}, {0.4, kInf}, {kNaN, 0.05}, {0.3, kNaN}, {kInf, 0.1}};
  const CredibleSet result = credible_set(evidence, 0.2);
  EXPECT_EQ(result.members[0].pip, 1.0);
  EXPECT_TRUE(result.members[0].in_95);
  for (std::size_t index = 1; index < evidence.size(); ++index) {
    EXPECT_EQ(result.members[index].pip, 0.0) << index;
    EXPECT_TRUE(std::isnan(result.members[index].log10_bayes_factor)) << index;
    EXPECT_FALSE(result.members[index].in_99) << index;
  }
  EXPECT_EQ(result.size_95, 1u);
  EXPECT_EQ(result.size_99, 1u);

  const CredibleSet nothing = credible_set({{0.4, 0.0}, {kNaN, 0.1}}, 0.2);
  EXPECT_EQ(nothing.size_95, 0u);
  EXPECT_EQ(nothing.size_99, 0u);
  EXPECT_EQ(nothing.members[0].pip, 0.0);
  EXPECT_TRUE(credible_set({}, 0.2).members.empty());
}

TEST(CredibleSets, HugeEvidenceDoesNotOverflow) {
  // z = 2000: BF of about e^2,000,000, far beyond a double.
  const CredibleSet result = credible_set({{20.0, 0.01}, {19.99, 0.01}, {0.1, 0.05}}, 0.2);
  EXPECT_TRUE(std::isfinite(result.members[0].log10_bayes_factor));
  EXPECT_GT(result.members[0].log10_bayes_factor, 8e5);
  EXPECT_EQ(result.members[0].pip, 1.0);
  EXPECT_EQ(result.members[2].pip, 0.0);
  EXPECT_EQ(result.size_99, 1u);
}

TEST(CredibleSets, BayesFactorIgnoresTheEffectsSign) {
  const CredibleSet result = credible_set({{0.3, 0.07}, {-0.3, 0.07}}, 0.2);
  EXPECT_EQ(result.members[0].log10_bayes_factor, result.members[1].log10_bayes_factor);
  EXPECT_DOUBLE_EQ(result.members[0].pip, 0.5);
  EXPECT_TRUE(result.members[0].in_95);  // a tie goes to the earlier entry
  EXPECT_TRUE(result.members[1].in_95);  // 0.5 alone does not reach 0.95
  EXPECT_EQ(credible_set_size(result.members, 0.4), 1u);
}

TEST(CredibleSets, DefaultPriorAndArgumentChecks) {
  EXPECT_EQ(default_prior_effect_sd(true, kNaN), 0.2);  // log odds ratio: see the header
  EXPECT_DOUBLE_EQ(default_prior_effect_sd(false, 2.0), 0.3);  // 0.15 trait SDs
  EXPECT_THROW(default_prior_effect_sd(false, 0.0), std::invalid_argument);
  EXPECT_THROW(default_prior_effect_sd(false, kNaN), std::invalid_argument);
  EXPECT_THROW(credible_set({{0.1, 0.1}}, 0.0), std::invalid_argument);
  EXPECT_THROW(credible_set({{0.1, 0.1}}, kInf), std::invalid_argument);
  const CredibleSet result = credible_set({{0.1, 0.1}}, 0.2);
  EXPECT_THROW(credible_set_size(result.members, 0.0), std::invalid_argument);
  EXPECT_THROW(credible_set_size(result.members, 1.5), std::invalid_argument);
  EXPECT_EQ(credible_set_size(result.members, 1.0), 1u);
}

}  // namespace
}  // namespace tamis
