// Access to a genotype file's .tbi (VCF.gz) or .csi (BCF, or VCF.gz) index:
// contig ids, per-contig record counts and region iterators. Shared by the
// reader (regions) and the shard planner.
#pragma once

#include <htslib/hts.h>
#include <htslib/tbx.h>
#include <htslib/vcf.h>

#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <unordered_map>
#include <vector>

#include "tamis/genotype_reader.hpp"

namespace tamis::genotype_detail {

struct IndexedContig {
  int tid = -1;
  std::string name;
  std::uint64_t record_count = 0;  // from the index's statistics; 0 when it has none
};

struct IteratorDeleter {
  void operator()(hts_itr_t* iterator) const { hts_itr_destroy(iterator); }
};
using IteratorPtr = std::unique_ptr<hts_itr_t, IteratorDeleter>;

struct HtsFileCloser {
  void operator()(htsFile* handle) const { hts_close(handle); }
};
using HtsFilePtr = std::unique_ptr<htsFile, HtsFileCloser>;

struct VcfHeaderDeleter {
  void operator()(bcf_hdr_t* header) const { bcf_hdr_destroy(header); }
};
using VcfHeaderPtr = std::unique_ptr<bcf_hdr_t, VcfHeaderDeleter>;

// Queries end here at the latest: far beyond any contig (17 Tb), and safe
// for htslib's bin arithmetic.
constexpr std::int64_t largest_query_end = std::int64_t(1) << 44;

class FileIndex {
 public:
  // Loads the index of an open VCF.gz or BCF file; nothing when the file has
  // none (or cannot have one: plain or gzip-compressed VCF). `header` is the
  // file's header, needed for a BCF index, whose contig ids are the header's.
  static std::unique_ptr<FileIndex> load(const std::string& path, htsFile* handle,
                                         const bcf_hdr_t* header);
  ~FileIndex();
  FileIndex(const FileIndex&) = delete;
  FileIndex& operator=(const FileIndex&) = delete;

  bool is_tabix() const { return tabix_ != nullptr; }
  tbx_t* tabix() const { return tabix_; }
  // The index's id of `contig`, or -1 when the index does not know it.
  int contig_id(const std::string& contig) const;
  // Every contig the index lists, in id order.
  const std::vector<IndexedContig>& contigs() const { return contigs_; }
  // Total records by the index's statistics; nothing when a contig lacks them.
  std::optional<std::uint64_t> total_records() const;
  // An iterator over the records overlapping [begin, end) (0-based, half
  // open, the end capped at largest_query_end); null when the contig has no
  // records in the index.
  IteratorPtr query(int tid, std::int64_t begin, std::int64_t end) const;

 private:
  FileIndex() = default;

  hts_idx_t* index_ = nullptr;  // owned unless tabix_ owns it
  tbx_t* tabix_ = nullptr;
  std::vector<IndexedContig> contigs_;
  std::vector<bool> has_statistics_;
  std::unordered_map<std::string, int> ids_;
};

// The error for a file that must be read through an index and has none.
[[noreturn]] void throw_missing_index(const std::string& path, htsFile* handle,
                                      const std::string& purpose);

// Opens `path` only to load its index (and header); used by the shard planner.
// The members own what they hold, so a constructor that throws half way (no
// index, a bad header) still closes the file: no destructor runs then.
// Declared in the order they are made, so they are freed index first, file last.
struct IndexedFile {
  HtsFilePtr handle;
  VcfHeaderPtr header;
  std::unique_ptr<FileIndex> index;

  explicit IndexedFile(const std::string& path, const std::string& purpose);
};

// Overlapping or touching regions of one contig become one; contigs keep the
// order of their first appearance, and each contig's regions are sorted.
std::vector<GenomicRegion> merge_regions(const std::vector<GenomicRegion>& regions);

}  // namespace tamis::genotype_detail
