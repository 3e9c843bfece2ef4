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

// Set results (PREFIX.TRAIT.sets.tsv.gz, scan --sets) are joined in shard
// order under one header and indexed afresh; their rows must stay sorted
// (chromosomes in stream order, starts rising), as each set belongs to one
// shard. result_files lists the traits' files, then the set files.
//
// Refuses (tamis::Error, usage) when a shard is missing or given twice, when
// the parts come from different runs (fingerprints differ), when they
// overlap, when their traits differ, or when some parts have set results and
// others not; (results_input) when the joined set rows would be out of order.
MergeSummary merge_shards(const MergeOptions& options);

}  // namespace tamis
