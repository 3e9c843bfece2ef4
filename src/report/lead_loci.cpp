#include "report/lead_loci.hpp"

#include <algorithm>
#include <numeric>

namespace tamis::report {

namespace {

// The variants of each chromosome sorted by position; built on first use,
// since a trait without candidates needs none of it.
class PositionIndex {
 public:
  explicit PositionIndex(const TraitResults& results) : results_(results) {}

  const std::vector<std::uint32_t>& sorted_variants(std::uint32_t chromosome) {
    if (by_chromosome_.empty()) build();
    return by_chromosome_[chromosome];
  }

 private:
  void build() {
    by_chromosome_.resize(results_.chromosome_names.size());
    for (std::size_t variant_idx = 0; variant_idx < results_.n_rows; ++variant_idx) {
      by_chromosome_[results_.chromosome_of[variant_idx]].push_back(static_cast<std::uint32_t>(variant_idx));
    }
    for (std::vector<std::uint32_t>& variants : by_chromosome_) {
      std::stable_sort(variants.begin(), variants.end(), [&](std::uint32_t left, std::uint32_t right) {
        return results_.position_of[left] < results_.position_of[right];
      });
    }
  }

  const TraitResults& results_;
  std::vector<std::vector<std::uint32_t>> by_chromosome_;
};

std::vector<std::size_t> candidates_by_significance(const TraitResults& results) {
  std::vector<std::size_t> order(results.candidates.size());
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(), [&](std::size_t left, std::size_t right) {
    return results.candidates[left].neg_log_10_p > results.candidates[right].neg_log_10_p;
  });
  return order;
}

}  // namespace

std::vector<LeadLocus> group_lead_loci(const TraitResults& results, std::int64_t radius) {
  std::vector<LeadLocus> leads;
  std::vector<bool> taken(results.n_rows, false);
  PositionIndex positions(results);

  for (std::size_t candidate_idx : candidates_by_significance(results)) {
    const std::size_t lead_variant = results.candidates[candidate_idx].variant_idx;
    if (taken[lead_variant]) continue;
    const std::int64_t lead_position = results.position_of[lead_variant];
    const std::vector<std::uint32_t>& variants = positions.sorted_variants(results.chromosome_of[lead_variant]);
    auto first = std::lower_bound(variants.begin(), variants.end(), lead_position - radius,
                                  [&](std::uint32_t variant, std::int64_t position) {
                                    return results.position_of[variant] < position;
                                  });
    LeadLocus locus;
    locus.candidate_idx = candidate_idx;
    locus.span_start = lead_position;
    locus.span_end = lead_position;
    for (auto member = first; member != variants.end() && results.position_of[*member] <= lead_position + radius;
         ++member) {
      if (taken[*member]) continue;
      taken[*member] = true;
      ++locus.n_variants;
      locus.span_start = std::min(locus.span_start, results.position_of[*member]);
      locus.span_end = std::max(locus.span_end, results.position_of[*member]);
    }
    leads.push_back(locus);
  }
  return leads;
}

}  // namespace tamis::report
