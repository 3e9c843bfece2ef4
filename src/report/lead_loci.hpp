// Lead loci grouped by distance: the most significant remaining variant
// becomes a lead and takes every remaining variant within the locus radius on
// its chromosome; repeat while candidates (rows below the lead threshold) remain.
#pragma once

#include <cstddef>
#include <cstdint>
#include <vector>

#include "report/trait_results.hpp"

namespace tamis::report {

struct LeadLocus {
  std::size_t candidate_idx = 0;  // into TraitResults::candidates
  std::int64_t span_start = 0;    // first and last position of the variants it took
  std::int64_t span_end = 0;
  std::size_t n_variants = 0;     // the variants it took, itself included
};

// Leads in order of significance (ties: earlier row first). A variant belongs
// to a lead's locus when |position - lead position| <= radius.
std::vector<LeadLocus> group_lead_loci(const TraitResults& results, std::int64_t radius);

}  // namespace tamis::report
