// A BGZF file read as one stream of bytes, inflated ahead of the reader in
// chunks of blocks that any thread may inflate. The reading thread only
// copies bytes out; the scan's worker threads call help() between blocks of
// work, so that inflating, most of the cost of reading a BCF, leaves the
// serial stage of the pipeline. With no helpers the reader inflates each
// chunk itself, when it reaches it: the stream then reads like plain BGZF.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <mutex>
#include <string>
#include <vector>

struct hFILE;

namespace tamis::genotype_detail {

class PrefetchedBgzf {
 public:
  // Reads `path` from BGZF virtual offset `start` (a block's file offset
  // times 65536 plus a byte offset into its inflated data, as bgzf_tell
  // gives it). Null when the file cannot be opened or sought.
  static std::unique_ptr<PrefetchedBgzf> open(const std::string& path, std::int64_t start);
  ~PrefetchedBgzf();
  PrefetchedBgzf(const PrefetchedBgzf&) = delete;
  PrefetchedBgzf& operator=(const PrefetchedBgzf&) = delete;

  // Serial: copies up to `length` bytes to `out`; returns how many, fewer
  // only at the end of the data. Returns -1 once the data is damaged: a block
  // that is not BGZF, fails to inflate or fails its CRC, or a cut-short file.
  // Throws std::bad_alloc when a chunk found no memory, whoever inflated it.
  std::int64_t read(void* out, std::size_t length);

  // Thread-safe, and safe while read() runs: inflates the next chunk still
  // waiting, if any. True when it inflated one.
  bool help();

 private:
  struct Chunk;
  // `skip`: bytes of the first block's data before the start.
  PrefetchedBgzf(hFILE* file, std::size_t skip);
  void fill(Chunk& chunk);
  bool claim_and_inflate(Chunk& chunk);
  Chunk& wait_for(Chunk& chunk);
  bool next_chunk();

  hFILE* file_;
  std::vector<std::unique_ptr<Chunk>> ring_;
  std::size_t current_ = 0;         // the chunk read() copies from
  std::size_t offset_ = 0;          // bytes of it already copied (or skipped)
  bool file_ended_ = false;         // no raw block left to read
  bool damaged_ = false;
  std::atomic<std::size_t> help_from_{0};
  std::mutex done_mutex_;
  std::condition_variable done_;
};

}  // namespace tamis::genotype_detail
