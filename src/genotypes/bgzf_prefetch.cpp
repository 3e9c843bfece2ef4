// Chunks of BGZF blocks in a ring: the reader fills a chunk with raw
// blocks, publishes it as waiting, and later copies out its inflated bytes;
// whoever claims a waiting chunk first (a helper, or the reader when it gets
// there) inflates it. A chunk's state is the only thing threads share.

// Values sit at any byte offset: read them byte by byte (htslib's
// documented switch), not through misaligned word loads.
#ifndef HTS_ALLOW_UNALIGNED
#define HTS_ALLOW_UNALIGNED 0
#endif
#include <htslib/hts_endian.h>

#include "genotypes/bgzf_prefetch.hpp"

#include <htslib/hfile.h>
#include <libdeflate.h>

#include <algorithm>
#include <cstring>
#include <new>

namespace tamis::genotype_detail {

namespace {

// BGZF framing (SAMv1 specification, section 4.1): an 18-byte gzip header
// whose one extra subfield "BC" holds the block size less one, the deflated
// data, then the CRC32 and the inflated size of the block.
constexpr std::size_t kHeaderBytes = 18;
constexpr std::size_t kTrailerBytes = 8;
constexpr std::size_t kLargestInflatedBlock = 65536;

constexpr std::size_t kChunksInRing = 8;
// About 1 MiB inflated per chunk: large enough that claiming one is cheap
// next to inflating it, small enough that the ring stays in cache-sized
// pieces and helpers can share the work.
constexpr std::size_t kBlocksPerChunk = 16;

bool is_bgzf_header(const std::uint8_t* header) {
  return header[0] == 31 && header[1] == 139 && header[2] == 8 && (header[3] & 4) != 0 &&
         le_to_u16(header + 10) == 6 && header[12] == 'B' && header[13] == 'C' && le_to_u16(header + 14) == 2;
}

// Reads exactly `length` bytes; false when fewer are left or reading fails.
bool read_exactly(hFILE* file, std::uint8_t* out, std::size_t length) {
  return hread(file, out, length) == static_cast<ssize_t>(length);
}

struct DecompressorDeleter {
  void operator()(libdeflate_decompressor* decompressor) const { libdeflate_free_decompressor(decompressor); }
};

}  // namespace

struct PrefetchedBgzf::Chunk {
  enum State : int { waiting, inflating, inflated };
  struct Block {
    std::size_t raw_offset = 0;
    std::size_t raw_size = 0;
    std::uint32_t crc = 0;
    std::uint32_t inflated_size = 0;
  };
  std::atomic<int> state{inflated};
  std::vector<std::uint8_t> raw;  // the blocks, back to back
  std::vector<Block> blocks;
  bool raw_damaged = false;       // the file is damaged right after `blocks`
  bool inflate_failed = false;    // a block failed; `size` covers those before it
  bool out_of_memory = false;     // no room for the inflated data: read() throws
  std::unique_ptr<std::uint8_t[]> data;
  std::size_t capacity = 0;
  std::size_t size = 0;

  bool damaged() const { return raw_damaged || inflate_failed; }
  void inflate();
};

void PrefetchedBgzf::Chunk::inflate() {
  std::size_t total = 0;
  for (const Block& block : blocks) total += block.inflated_size;
  if (capacity < total) {
    data = std::make_unique<std::uint8_t[]>(total);
    capacity = total;
  }
  size = 0;
  inflate_failed = false;
  const std::unique_ptr<libdeflate_decompressor, DecompressorDeleter> decompressor(libdeflate_alloc_decompressor());
  if (!decompressor) {
    inflate_failed = true;
    return;
  }
  for (const Block& block : blocks) {
    std::uint8_t* out = data.get() + size;
    std::size_t produced = 0;
    const libdeflate_result result = libdeflate_deflate_decompress(
        decompressor.get(), raw.data() + block.raw_offset + kHeaderBytes,
        block.raw_size - kHeaderBytes - kTrailerBytes, out, block.inflated_size, &produced);
    if (result != LIBDEFLATE_SUCCESS || produced != block.inflated_size ||
        libdeflate_crc32(0, out, produced) != block.crc) {
      inflate_failed = true;
      return;
    }
    size += produced;
  }
}

std::unique_ptr<PrefetchedBgzf> PrefetchedBgzf::open(const std::string& path, std::int64_t start) {
  hFILE* file = hopen(path.c_str(), "r");
  if (!file) return nullptr;
  if (hseek(file, static_cast<off_t>(start >> 16), SEEK_SET) < 0) {
    hclose_abruptly(file);
    return nullptr;
  }
  return std::unique_ptr<PrefetchedBgzf>(new PrefetchedBgzf(file, static_cast<std::size_t>(start & 0xFFFF)));
}

PrefetchedBgzf::PrefetchedBgzf(hFILE* file, std::size_t skip) : file_(file), offset_(skip) {
  for (std::size_t chunk_idx = 0; chunk_idx < kChunksInRing; ++chunk_idx) {
    ring_.push_back(std::make_unique<Chunk>());
    fill(*ring_.back());
  }
}

PrefetchedBgzf::~PrefetchedBgzf() {
  // Helpers hold no chunk past help(), and help() is not called on a stream
  // being destroyed (the owner shares it with them), so nothing is in flight.
  hclose_abruptly(file_);
}

// Serial (the reader): the next raw blocks of the file, then published.
void PrefetchedBgzf::fill(Chunk& chunk) {
  chunk.raw.clear();
  chunk.blocks.clear();
  chunk.raw_damaged = false;
  chunk.size = 0;
  while (chunk.blocks.size() < kBlocksPerChunk && !file_ended_) {
    std::uint8_t header[kHeaderBytes];
    const ssize_t got = hread(file_, header, sizeof header);
    if (got == 0) {
      file_ended_ = true;
      break;
    }
    const std::size_t block_size = got == static_cast<ssize_t>(sizeof header) ? le_to_u16(header + 16) + 1u : 0;
    if (block_size < kHeaderBytes + kTrailerBytes || !is_bgzf_header(header)) {
      chunk.raw_damaged = file_ended_ = true;
      break;
    }
    const std::size_t raw_offset = chunk.raw.size();
    chunk.raw.resize(raw_offset + block_size);
    std::memcpy(chunk.raw.data() + raw_offset, header, sizeof header);
    if (!read_exactly(file_, chunk.raw.data() + raw_offset + kHeaderBytes, block_size - kHeaderBytes)) {
      chunk.raw_damaged = file_ended_ = true;
      break;
    }
    const std::uint8_t* trailer = chunk.raw.data() + raw_offset + block_size - kTrailerBytes;
    Chunk::Block block{raw_offset, block_size, le_to_u32(trailer), le_to_u32(trailer + 4)};
    if (block.inflated_size > kLargestInflatedBlock) {
      chunk.raw_damaged = file_ended_ = true;
      break;
    }
    chunk.blocks.push_back(block);
  }
  chunk.state.store(Chunk::waiting, std::memory_order_release);
}

bool PrefetchedBgzf::claim_and_inflate(Chunk& chunk) {
  int expected = Chunk::waiting;
  if (!chunk.state.compare_exchange_strong(expected, Chunk::inflating, std::memory_order_acq_rel)) return false;
  // A helper must not leave the chunk claimed: the reader would wait for it
  // for ever. The failure goes to the reader, which meets it in order.
  try {
    chunk.out_of_memory = false;
    chunk.inflate();
  } catch (const std::bad_alloc&) {
    chunk.out_of_memory = true;
    chunk.size = 0;
  }
  chunk.state.store(Chunk::inflated, std::memory_order_release);
  { const std::lock_guard<std::mutex> lock(done_mutex_); }  // no waiter misses the notice
  done_.notify_all();
  return true;
}

PrefetchedBgzf::Chunk& PrefetchedBgzf::wait_for(Chunk& chunk) {
  if (chunk.state.load(std::memory_order_acquire) == Chunk::inflated || claim_and_inflate(chunk)) return chunk;
  std::unique_lock<std::mutex> lock(done_mutex_);
  done_.wait(lock, [&] { return chunk.state.load(std::memory_order_acquire) == Chunk::inflated; });
  return chunk;
}

bool PrefetchedBgzf::help() {
  const std::size_t from = help_from_.load(std::memory_order_relaxed);
  for (std::size_t step = 0; step < ring_.size(); ++step) {
    Chunk& chunk = *ring_[(from + step) % ring_.size()];
    if (chunk.state.load(std::memory_order_acquire) == Chunk::waiting && claim_and_inflate(chunk)) return true;
  }
  return false;
}

// The current chunk is used up: it takes the blocks after the last chunk's,
// and reading moves on. False at the end of the data (a chunk without blocks).
bool PrefetchedBgzf::next_chunk() {
  Chunk& used = *ring_[current_];
  if (used.blocks.empty()) return false;
  fill(used);
  current_ = (current_ + 1) % ring_.size();
  offset_ = 0;
  help_from_.store(current_, std::memory_order_relaxed);
  return true;
}

std::int64_t PrefetchedBgzf::read(void* out, std::size_t length) {
  auto* target = static_cast<std::uint8_t*>(out);
  std::size_t copied = 0;
  while (copied < length && !damaged_) {
    const Chunk& chunk = wait_for(*ring_[current_]);
    if (chunk.out_of_memory) throw std::bad_alloc();
    if (offset_ < chunk.size) {
      const std::size_t count = std::min(length - copied, chunk.size - offset_);
      std::memcpy(target + copied, chunk.data.get() + offset_, count);
      offset_ += count;
      copied += count;
      continue;
    }
    if (chunk.damaged()) {
      damaged_ = true;
      break;
    }
    if (!next_chunk()) break;
  }
  return damaged_ ? -1 : static_cast<std::int64_t>(copied);
}

}  // namespace tamis::genotype_detail
