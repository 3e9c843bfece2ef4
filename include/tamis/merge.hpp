// `tamis merge`: joins the parts of a sharded scan into the files that the
// same scan run whole would have written.
#pragma once

#include <string>
#include <vector>

namespace tamis {

struct MergeOptions {
  std::string out_prefix;
  std::vector<std::string> part_prefixes;  // the --out of each `tamis scan --shard K/N`
};

struct MergeSummary {
  std::vector<std::string> result_files;
  int shard_count = 0;
};

// Refuses (tamis::Error, usage) when a shard is missing or given twice, when
// the parts come from different runs (fingerprints differ), when they
// overlap, or when their traits differ.
MergeSummary merge_shards(const MergeOptions& options);

}  // namespace tamis
