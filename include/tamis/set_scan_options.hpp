// What `scan --sets` asks for: the set file and how its variants are chosen
// and weighted.
#pragma once

#include <cstddef>
#include <set>
#include <string>

namespace tamis {

enum class SetWeighting { beta, flat, listed };
const char* set_weighting_name(SetWeighting weighting);  // "beta_1_25", "flat", "listed"

// What `scan --sets` asks for.
struct SetScanOptions {
  std::string path;  // empty: no set tests
  double maf_ceiling = 0.01;  // variants above this minor allele frequency stay out of the sets
  SetWeighting weighting = SetWeighting::beta;
  // Variants with a minor allele count at or below this are summed into one
  // pseudo-variant per set before the tests; 0 keeps every variant apart.
  double collapse_mac = 0.0;
  std::size_t max_variants = 5000;  // a larger set is skipped with a warning
  // Every set is first tested with the screening tails (saddlepoint and
  // moment matching); a set whose variance-component or optimal p comes
  // out below this is tested again with the exact tails. 1: every set exactly.
  double exact_below = 1e-3;
  // `confirm` of set results: only these sets are tested again (empty: every set).
  std::set<std::string> only_sets;
  bool active() const { return !path.empty(); }
};

}  // namespace tamis
