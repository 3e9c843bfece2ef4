// The per-block work shared by traits: site totals less the samples every
// trait leaves out, and the sample-major copy with its list of missing
// dosages. Checked against plain loops over the same block.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <random>
#include <vector>

#include "scan/trait_pass.hpp"

namespace tamis {
namespace {

// Simulated dosages (for this test only): a few sites without hard calls,
// some haploid calls, about 2% missing.
DosageBlock make_block(std::size_t samples, std::size_t sites, unsigned seed) {
  std::mt19937 random(seed);
  DosageBlock block;
  block.sample_count = samples;
  for (std::size_t site = 0; site < sites; ++site) {
    VariantSite variant;
    variant.has_hard_calls = site % 3 != 0;
    variant.source = site % 2 ? DosageField::ds : DosageField::gt;
    block.sites.push_back(variant);
  }
  block.dosages.resize(samples * sites);
  block.ploidy.resize(samples * sites);
  block.diploid_calls.resize(samples * sites);
  for (std::size_t at = 0; at < block.dosages.size(); ++at) {
    const int call = static_cast<int>(random() % 3);
    const bool missing = random() % 50 == 0;
    block.dosages[at] = missing ? std::nan("") : call + 0.001 * static_cast<double>(random() % 100);
    block.ploidy[at] = missing ? 0 : (random() % 40 == 0 ? 1 : 2);
    block.diploid_calls[at] = static_cast<std::int8_t>(missing ? -1 : call);
  }
  return block;
}

TEST(BlockTotals, LessTheSamplesLeftOutByAllEqualsTheSumOverTheRest) {
  const DosageBlock block = make_block(1003, 21, 5);
  const std::vector<std::size_t> left_out = {0, 7, 8, 9, 500, 1001, 1002};
  BlockTotals totals;
  total_block(block, 1, left_out, totals);
  ASSERT_EQ(totals.sites.size(), block.size());
  for (std::size_t site = 0; site < block.size(); ++site) {
    double called = 0, sum = 0, squares = 0, slots = 0, hom_ref = 0, het = 0, hom_alt = 0;
    for (std::size_t sample = 0; sample < block.sample_count; ++sample) {
      if (std::find(left_out.begin(), left_out.end(), sample) != left_out.end()) continue;
      const double value = block.site_dosages(site)[sample];
      if (!std::isnan(value)) {
        called += 1;
        sum += value;
        squares += value * value;
        const int ploidy = block.site_ploidy(site)[sample];
        slots += ploidy > 0 ? ploidy : 2;
      }
      const int call = block.site_diploid_calls(site)[sample];
      hom_ref += call == 0;
      het += call == 1;
      hom_alt += call == 2;
    }
    const SiteTotals& got = totals.sites[site];
    EXPECT_EQ(got.called, called) << site;
    EXPECT_NEAR(got.sum, sum, 1e-9) << site;
    EXPECT_NEAR(got.squares, squares, 1e-9) << site;
    if (!block.sites[site].has_hard_calls) continue;
    EXPECT_EQ(got.slots, slots) << site;
    EXPECT_NEAR(got.copies, sum, 1e-9) << site;  // unscaled: every dosage counts its own value
    EXPECT_EQ(got.hom_ref, hom_ref) << site;
    EXPECT_EQ(got.het, het) << site;
    EXPECT_EQ(got.hom_alt, hom_alt) << site;
  }
}

// Every genotype sample as a row, and a subset with gaps (which takes the
// copy's one-sample path as well as its runs of eight).
TEST(GatheredBlock, HoldsEveryRowsDosagesWithMissingOnesAsZeroAndListed) {
  const DosageBlock block = make_block(517, 19, 9);
  std::vector<std::size_t> all_rows(block.sample_count), some_rows;
  for (std::size_t sample = 0; sample < block.sample_count; ++sample) {
    all_rows[sample] = sample;
    if (sample % 11 != 4) some_rows.push_back(sample);
  }
  for (const std::vector<std::size_t>* rows : {&all_rows, &some_rows}) {
    GatheredBlock gathered;
    gather_block(*rows, block, gathered);
    const std::size_t width = block.size();
    ASSERT_EQ(gathered.genotypes.size(), rows->size() * width);
    ASSERT_EQ(gathered.missing_starts.size(), width + 1);
    for (std::size_t site = 0; site < width; ++site) {
      std::vector<std::uint32_t> expected_missing;
      for (std::size_t row = 0; row < rows->size(); ++row) {
        const double value = block.site_dosages(site)[(*rows)[row]];
        const double copied = gathered.genotypes[row * width + site];
        if (std::isnan(value)) {
          expected_missing.push_back(static_cast<std::uint32_t>(row));
          EXPECT_EQ(copied, 0.0);
        } else {
          EXPECT_EQ(copied, value);
        }
      }
      const std::vector<std::uint32_t> listed(gathered.missing_rows.begin() + gathered.missing_starts[site],
                                              gathered.missing_rows.begin() + gathered.missing_starts[site + 1]);
      EXPECT_EQ(listed, expected_missing) << "site " << site;
      EXPECT_FALSE(expected_missing.empty()) << "the simulated block should miss some dosages";
    }
  }
}

}  // namespace
}  // namespace tamis
