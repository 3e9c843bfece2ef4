// The serial side of the set tests, one per trait: the variants of the
// sets the stream is inside are held until the stream has passed a set's
// last variant; the set is then tested, its variants released, and its row
// kept until its chromosome is finished, when the chromosome's rows go out
// sorted by start (as tabix needs). Memory holds the open sets only.
#pragma once

#include <cstddef>
#include <cstdint>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include <tbb/task_group.h>

#include "scan/set_collection.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {

struct TraitContext;

struct SetTally {
  std::uint64_t tested = 0;
  std::uint64_t too_large = 0;     // more variants than --set-max-variants: skipped
  std::uint64_t split_across_chromosomes = 0;  // variants of a set already tested on another chromosome: left out
  std::uint64_t variants_collapsed = 0;
  std::vector<std::string> too_large_names;  // the first few, for the log
};

// One open set: its variants so far, and each one's weight from the set file.
struct OpenSet {
  std::vector<std::shared_ptr<const SetVariant>> variants;
  std::vector<double> listed_weights;
};

// A tested set's row, waiting for its chromosome to end.
struct PendingSetRow {
  std::string contig_key;
  std::size_t contig_rank = 0;  // the contigs' order in the stream
  std::int64_t start = 0, end = 0;
  std::uint32_t set_index = 0;
  std::string text;
};

class SetAccumulator {
 public:
  SetAccumulator(const VariantSets& sets, const SetScanOptions& options, const TraitContext& trait);
  ~SetAccumulator();
  SetAccumulator(const SetAccumulator&) = delete;
  SetAccumulator& operator=(const SetAccumulator&) = delete;

  // The block's set variants, in stream order, then where the stream stands
  // after the block (contig key and position of its last site). Sets the
  // stream has passed are tested; their rows become ready when their
  // chromosome ends.
  void add_block(std::vector<SetVariant>& variants, const std::string& contig_key, std::int64_t position);
  // The stream has ended: every open set is tested.
  void finish();
  // Appends the rows of finished chromosomes, sorted by start, and forgets them.
  void take_rows(std::string& out);

  // The state a checkpoint keeps (open sets, rows waiting, tallies), as
  // bytes, and its return on --resume; restore throws tamis::Error (usage)
  // naming `source` when the bytes are damaged.
  void save(std::string& out);
  void restore(const std::string& bytes, std::size_t& offset, const std::string& source);

  const SetTally& tally() const { return tally_; }
  std::size_t max_variants() const { return options_.max_variants; }

 private:
  void close_passed_sets(const std::string& contig_key, std::int64_t position);
  // A set the stream has passed, tested by a task of its own.
  struct ClosedSet {
    OpenSet open;
    PendingSetRow row;
    bool tested = false;
    std::size_t collapsed = 0;
  };
  void test_and_keep(const std::vector<std::uint32_t>& closing);
  void test_closed_set(ClosedSet& job) const;
  // Waits for the tasks and moves their rows to pending_, with their tallies.
  void collect_closed_sets();
  void release_finished_contig(const std::string& contig_key);

  const VariantSets& sets_;
  const SetScanOptions& options_;
  const TraitContext& trait_;
  std::string stream_contig_;
  std::map<std::string, std::size_t> contig_rank_;
  std::map<std::uint32_t, OpenSet> open_;
  std::vector<bool> done_;
  std::vector<std::unique_ptr<ClosedSet>> closed_;  // handed to tasks, not yet collected
  std::unique_ptr<tbb::task_group> tasks_;
  std::vector<PendingSetRow> pending_;
  std::string ready_;
  SetTally tally_;
};

// One set's tests from its variants (pure computation, exposed for tests):
// the burden, variance-component, optimal and Cauchy tests and their
// combination; `listed_weights` are the set file's weights of the variants.
SetResultRow test_set_variants(const TraitContext& trait, const SetScanOptions& options, const std::string& name,
                               const std::vector<std::shared_ptr<const SetVariant>>& variants,
                               const std::vector<double>& listed_weights, std::size_t* collapsed = nullptr);

}  // namespace tamis
