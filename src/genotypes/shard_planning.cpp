// Splitting the genome of a set of indexed files into shards of near-equal
// record counts, from the indexes alone.
//
// The genome is the files' contigs in file order (a contig in several files
// counts once, where it first appears), each from position 1 up. A shard is
// the stretch between two cut points; a cut point is a contig and a position,
// so the shards partition every contig's positions and, with POS semantics,
// every record lands in exactly one shard whatever the estimates are.
//
// The estimates: the index's statistics give each contig's record count. To
// place a cut inside a contig, the contig is swept in fixed windows (16 to
// 256 kb, about 4096 per contig). An index query for a window returns chunks
// of virtual offsets; the furthest chunk end seen so far marks how much of
// the contig's data lies at or before the window, so the growth of that mark
// from one window to the next stands in for the window's records, scaled so
// that the windows of a contig add up to its count. Inside a window records
// are taken as evenly spread.
#include <htslib/bgzf.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <limits>
#include <optional>
#include <string>
#include <unordered_map>
#include <vector>

#include "genotypes/genotype_index.hpp"
#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis {

namespace {

using genotype_detail::FileIndex;
using genotype_detail::IndexedFile;
using genotype_detail::IteratorPtr;

// The finest bin of .tbi and of default .csi indexes (min_shift 14); the
// profile never looks finer than the index can tell.
constexpr std::int64_t smallest_window = std::int64_t(1) << 14;
constexpr std::int64_t whole_contig_span = genotype_detail::largest_query_end;
constexpr std::int64_t largest_window = std::int64_t(1) << 18;
constexpr std::int64_t target_windows = 4096;
constexpr std::size_t ratio_sample_bytes = 1 << 20;

struct Window {
  std::int64_t begin = 0;  // 0-based, half open
  std::int64_t end = 0;
  double records = 0.0;  // estimated
};

struct ContigPlan {
  std::string name;
  double records = 0.0;
  std::vector<Window> windows;
};

// Compressed bytes per uncompressed byte near the start of the data, so that
// a virtual offset (block address << 16 | offset in block) maps onto one
// scale: records inside a single block still have a measurable extent.
double estimate_compression_ratio(htsFile* handle) {
  if (!handle->is_bgzf) return 1.0;
  BGZF* stream = handle->fp.bgzf;
  const std::uint64_t start = static_cast<std::uint64_t>(bgzf_tell(stream));
  std::vector<char> buffer(ratio_sample_bytes);
  const ssize_t read = bgzf_read(stream, buffer.data(), buffer.size());
  if (read <= 0) return 1.0;
  const std::uint64_t stop = static_cast<std::uint64_t>(bgzf_tell(stream));
  const double compressed = static_cast<double>((stop >> 16) - (start >> 16));
  // Uncompressed bytes from the start of the first block to the start of the last.
  const double uncompressed = static_cast<double>(read) + static_cast<double>(start & 0xffff) -
                              static_cast<double>(stop & 0xffff);
  if (compressed <= 0.0 || uncompressed <= 0.0) return 1.0;
  return compressed / uncompressed;
}

class ContigProfiler {
 public:
  ContigProfiler(const FileIndex& index, const bcf_hdr_t* header, double ratio)
      : index_(index), header_(header), ratio_(ratio) {}

  // Windows of the contig holding records, each with its share of `records`.
  std::vector<Window> profile(const genotype_detail::IndexedContig& contig) const {
    std::vector<Window> windows;
    IteratorPtr whole = index_.query(contig.tid, 0, whole_contig_span);
    if (!whole || whole->n_off == 0) return windows;
    const double start = linear_offset(whole->off[0].u);
    const double finish = linear_offset(furthest_end(*whole));
    const std::int64_t window_size = choose_window_size(contig);
    double reached = start;
    std::int64_t windows_without_progress = 0;
    for (std::int64_t begin = 0; reached < finish && begin < whole_contig_span; begin += window_size) {
      IteratorPtr iterator = index_.query(contig.tid, begin, begin + window_size);
      const double here = iterator && iterator->n_off > 0
                              ? std::min(finish, linear_offset(furthest_end(*iterator)))
                              : reached;
      if (here > reached) {
        windows.push_back(Window{begin, begin + window_size, here - reached});
        reached = here;
        windows_without_progress = 0;
      } else if (++windows_without_progress % 4096 == 0 && !holds_records_from(contig.tid, begin)) {
        break;  // a long empty stretch with nothing after it
      }
    }
    double weight_sum = 0.0;
    for (const Window& window : windows) weight_sum += window.records;
    const double records = static_cast<double>(contig.record_count);
    for (Window& window : windows) window.records = records * window.records / weight_sum;
    return windows;
  }

  // The first virtual offset of the contig's data, which orders contigs as
  // they lie in the file; nothing when the contig holds no record.
  std::optional<std::uint64_t> first_offset(int tid) const {
    IteratorPtr iterator = index_.query(tid, 0, whole_contig_span);
    if (!iterator || iterator->n_off == 0) return std::nullopt;
    return iterator->off[0].u;
  }

 private:
  double linear_offset(std::uint64_t virtual_offset) const {
    return static_cast<double>(virtual_offset >> 16) +
           ratio_ * static_cast<double>(virtual_offset & 0xffff);
  }

  static std::uint64_t furthest_end(const hts_itr_t& iterator) {
    std::uint64_t furthest = 0;
    for (int chunk_idx = 0; chunk_idx < iterator.n_off; ++chunk_idx) {
      furthest = std::max<std::uint64_t>(furthest, iterator.off[chunk_idx].v);
    }
    return furthest;
  }

  bool holds_records_from(int tid, std::int64_t begin) const {
    IteratorPtr rest = index_.query(tid, begin, whole_contig_span);
    return rest && rest->n_off > 0;
  }

  // About `target_windows` windows over the contig's extent: its declared
  // length, or else the end of the last power-of-two stretch holding records.
  std::int64_t choose_window_size(const genotype_detail::IndexedContig& contig) const {
    std::int64_t extent = declared_length(contig.name);
    if (extent <= 0) {
      extent = smallest_window;
      for (std::int64_t stretch = smallest_window; stretch < whole_contig_span; stretch *= 2) {
        IteratorPtr probe = index_.query(contig.tid, stretch, stretch * 2);
        if (probe && probe->n_off > 0) extent = stretch * 2;
      }
    }
    std::int64_t window_size = smallest_window;
    while (window_size < largest_window && window_size * target_windows < extent) window_size *= 2;
    return window_size;
  }

  std::int64_t declared_length(const std::string& contig) const {
    if (!header_) return 0;
    const int header_id = bcf_hdr_name2id(header_, contig.c_str());
    if (header_id < 0) return 0;
    return static_cast<std::int64_t>(header_->id[BCF_DT_CTG][header_id].val->info[0]);
  }

  const FileIndex& index_;
  const bcf_hdr_t* header_;
  double ratio_;
};

// Every contig with records, in genome order, with its windows from every file.
std::vector<ContigPlan> profile_genome(const std::vector<std::string>& paths) {
  std::vector<ContigPlan> contigs;
  std::unordered_map<std::string, std::size_t> rank_of;
  for (const std::string& path : paths) {
    IndexedFile file(path, "planning shards");
    const FileIndex& index = *file.index;
    const ContigProfiler profiler(index, file.header.get(),
                                  estimate_compression_ratio(file.handle.get()));
    // Contigs in the order their data lies in the file, not in id order.
    std::vector<std::pair<std::uint64_t, const genotype_detail::IndexedContig*>> present;
    for (const genotype_detail::IndexedContig& contig : index.contigs()) {
      std::optional<std::uint64_t> offset = profiler.first_offset(contig.tid);
      if (offset) present.emplace_back(*offset, &contig);
    }
    std::sort(present.begin(), present.end(),
              [](const auto& left, const auto& right) { return left.first < right.first; });
    for (const auto& [offset, contig] : present) {
      auto [found, inserted] = rank_of.emplace(contig->name, contigs.size());
      if (inserted) contigs.push_back(ContigPlan{contig->name, 0.0, {}});
      ContigPlan& plan = contigs[found->second];
      plan.records += static_cast<double>(contig->record_count);
      std::vector<Window> windows = profiler.profile(*contig);
      plan.windows.insert(plan.windows.end(), windows.begin(), windows.end());
    }
  }
  return contigs;
}

// The smallest 0-based position x with about `target` estimated records
// before it, the windows' records taken as evenly spread.
std::int64_t locate_in_contig(const ContigPlan& contig, double target) {
  if (target <= 0.0 || contig.windows.empty()) return 0;
  std::vector<std::int64_t> breakpoints;
  for (const Window& window : contig.windows) {
    breakpoints.push_back(window.begin);
    breakpoints.push_back(window.end);
  }
  std::sort(breakpoints.begin(), breakpoints.end());
  breakpoints.erase(std::unique(breakpoints.begin(), breakpoints.end()), breakpoints.end());
  auto records_before = [&](std::int64_t position) {
    double records = 0.0;
    for (const Window& window : contig.windows) {
      if (position >= window.end) {
        records += window.records;
      } else if (position > window.begin) {
        records += window.records * static_cast<double>(position - window.begin) /
                   static_cast<double>(window.end - window.begin);
      }
    }
    return records;
  };
  double before_previous = 0.0;
  for (std::size_t point_idx = 0; point_idx < breakpoints.size(); ++point_idx) {
    const double before_here = records_before(breakpoints[point_idx]);
    if (before_here >= target && point_idx > 0) {
      const std::int64_t left = breakpoints[point_idx - 1];
      const double fraction = (target - before_previous) / (before_here - before_previous);
      return left + static_cast<std::int64_t>(
                        std::llround(fraction * static_cast<double>(breakpoints[point_idx] - left)));
    }
    before_previous = before_here;
  }
  return breakpoints.back();
}

// A cut: the shard after it starts at `position` (1-based) of contig `rank`;
// rank == contig count marks the end of the genome.
struct CutPoint {
  std::size_t rank = 0;
  std::int64_t position = 1;
  bool operator<=(const CutPoint& other) const {
    return rank != other.rank ? rank < other.rank : position <= other.position;
  }
};

std::vector<CutPoint> place_cuts(const std::vector<ContigPlan>& contigs, int shard_count,
                                 const ShardCutMover& move_cut) {
  double total = 0.0;
  for (const ContigPlan& contig : contigs) total += contig.records;
  std::vector<CutPoint> cuts{CutPoint{0, 1}};
  for (int cut_idx = 1; cut_idx < shard_count; ++cut_idx) {
    const double target = total * cut_idx / shard_count;
    double before = 0.0;
    CutPoint cut{contigs.size(), 1};
    for (std::size_t rank = 0; rank < contigs.size(); ++rank) {
      if (target < before + contigs[rank].records) {
        cut = CutPoint{rank, locate_in_contig(contigs[rank], target - before) + 1};
        break;
      }
      before += contigs[rank].records;
    }
    // Rounding may leave the target just past the last contig.
    if (cut.rank >= contigs.size()) cut = CutPoint{contigs.size() - 1, 1};
    // Strictly increasing cuts give every shard at least one position, so no
    // shard's region list is empty (an empty list would mean "everything").
    if (move_cut && cut.rank < contigs.size()) cut.position = move_cut(contigs[cut.rank].name, cut.position);
    const CutPoint& previous = cuts.back();
    if (cut <= previous) {
      cut = CutPoint{previous.rank, previous.position + 1};
      if (move_cut) cut.position = move_cut(contigs[cut.rank].name, cut.position);
    }
    cuts.push_back(cut);
  }
  cuts.push_back(CutPoint{contigs.size(), 1});
  return cuts;
}

std::vector<GenomicRegion> regions_between(const std::vector<ContigPlan>& contigs,
                                           const CutPoint& from, const CutPoint& to) {
  std::vector<GenomicRegion> regions;
  for (std::size_t rank = from.rank; rank < contigs.size() && rank <= to.rank; ++rank) {
    GenomicRegion region;
    region.contig = contigs[rank].name;
    region.first = rank == from.rank ? from.position : 1;
    region.last = rank == to.rank ? to.position - 1 : std::numeric_limits<std::int64_t>::max();
    if (region.first <= region.last) regions.push_back(region);
  }
  return regions;
}

}  // namespace

std::vector<GenomicRegion> plan_shard(const std::vector<std::string>& paths, int shard,
                                      int shard_count, const ShardCutMover& move_cut) {
  if (shard_count < 1 || shard < 1 || shard > shard_count) {
    throw Error(ExitCode::usage, "",
                "shard " + std::to_string(shard) + " of " + std::to_string(shard_count) +
                    " does not exist",
                "number shards from 1 to the shard count, e.g. 3 of 10");
  }
  const std::vector<ContigPlan> contigs = profile_genome(paths);
  // Files without a single record: nothing to split, and reading them whole reads nothing.
  if (contigs.empty()) return {};
  const std::vector<CutPoint> cuts = place_cuts(contigs, shard_count, move_cut);
  return regions_between(contigs, cuts[shard - 1], cuts[shard]);
}

}  // namespace tamis
