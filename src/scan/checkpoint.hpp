// Checkpoints that let an interrupted scan resume from its last completed
// block, and the fingerprint that ties a checkpoint (or a shard) to its run.
#pragma once

#include <cstdint>
#include <map>
#include <optional>
#include <string>
#include <vector>

#include "tamis/scan.hpp"

namespace tamis {

struct CheckpointState {
  std::vector<std::string> run_description;  // what the fingerprint covers, one "key=value" per line
  std::uint64_t blocks = 0;
  std::uint64_t records = 0;
  std::uint64_t alleles = 0;
  std::map<std::string, std::uint64_t> compressed_sizes;  // trait -> bytes at the checkpoint
  std::map<std::string, TraitTally> tallies;
  // With --sets: each trait's set file at the checkpoint, and the digest of
  // the open sets' state (saved beside the checkpoint, see sets_state_path).
  std::map<std::string, std::uint64_t> set_compressed_sizes;
  std::string sets_state_digest;
};

// The inputs and every option that changes the results, one "key=value" per
// line. Input files are described by path, size and modification time.
// `with_shard_index` false leaves out K of --shard K/N, so that the parts of
// one sharded run share a fingerprint.
std::vector<std::string> describe_run(const ScanOptions& options, bool with_shard_index);

// A short hex digest of those lines.
std::string fingerprint_of(const std::vector<std::string>& description);

std::string checkpoint_path(const std::string& out_prefix);
std::string sets_state_path(const std::string& out_prefix);
void save_checkpoint(const std::string& path, const CheckpointState& state);
// Nothing when the file does not exist; throws tamis::Error (usage) when it is unreadable.
std::optional<CheckpointState> load_checkpoint(const std::string& path);

// Lines of `saved` and `current` that differ, for the refusal message.
std::vector<std::string> describe_differences(const std::vector<std::string>& saved,
                                              const std::vector<std::string>& current);

}  // namespace tamis
