// Index access shared by region reading and shard planning.
#include "genotypes/genotype_index.hpp"

#include <algorithm>
#include <cerrno>
#include <cstring>

#include "tamis/errors.hpp"

namespace tamis::genotype_detail {

std::unique_ptr<FileIndex> FileIndex::load(const std::string& path, htsFile* handle,
                                           const bcf_hdr_t* header) {
  const htsFormat* format = hts_get_format(handle);
  std::unique_ptr<FileIndex> loaded(new FileIndex());
  if (format->format == bcf) {
    loaded->index_ = bcf_index_load3(path.c_str(), nullptr, HTS_IDX_SILENT_FAIL);
  } else if (format->format == vcf && format->compression == bgzf) {
    // tbx_index_load3 also accepts a .csi made by `bcftools index` for VCF.gz.
    loaded->tabix_ = tbx_index_load3(path.c_str(), nullptr, HTS_IDX_SILENT_FAIL);
    if (loaded->tabix_) loaded->index_ = loaded->tabix_->idx;
  }
  if (!loaded->index_) return nullptr;

  const int sequence_count = hts_idx_nseq(loaded->index_);
  std::vector<std::string> names(static_cast<std::size_t>(std::max(sequence_count, 0)));
  if (loaded->tabix_) {
    int name_count = 0;
    const char** tabix_names = tbx_seqnames(loaded->tabix_, &name_count);
    for (int name_idx = 0; name_idx < name_count; ++name_idx) {
      const int tid = tbx_name2id(loaded->tabix_, tabix_names[name_idx]);
      if (tid >= 0 && tid < sequence_count) names[tid] = tabix_names[name_idx];
    }
    free(tabix_names);
  } else {
    // A BCF index numbers contigs as the header does.
    const int header_contigs = header ? header->n[BCF_DT_CTG] : 0;
    for (int tid = 0; tid < sequence_count && tid < header_contigs; ++tid) {
      names[tid] = bcf_hdr_id2name(header, tid);
    }
  }
  for (int tid = 0; tid < sequence_count; ++tid) {
    if (names[tid].empty()) continue;
    IndexedContig contig;
    contig.tid = tid;
    contig.name = names[tid];
    std::uint64_t mapped = 0, unmapped = 0;
    const bool counted = hts_idx_get_stat(loaded->index_, tid, &mapped, &unmapped) == 0;
    contig.record_count = counted ? mapped : 0;
    loaded->contigs_.push_back(contig);
    loaded->has_statistics_.push_back(counted);
    loaded->ids_.emplace(contig.name, tid);
  }
  return loaded;
}

FileIndex::~FileIndex() {
  if (tabix_) {
    tbx_destroy(tabix_);
  } else if (index_) {
    hts_idx_destroy(index_);
  }
}

int FileIndex::contig_id(const std::string& contig) const {
  auto found = ids_.find(contig);
  return found == ids_.end() ? -1 : found->second;
}

std::optional<std::uint64_t> FileIndex::total_records() const {
  std::uint64_t total = 0;
  for (std::size_t contig_idx = 0; contig_idx < contigs_.size(); ++contig_idx) {
    // A contig without statistics may still hold records (an old index);
    // its count is unknown, so the total is too. Contigs that a BCF header
    // declares but that hold no record have empty statistics, not none.
    if (!has_statistics_[contig_idx]) {
      IteratorPtr probe = query(contigs_[contig_idx].tid, 0, largest_query_end);
      if (probe && probe->n_off > 0) return std::nullopt;
      continue;
    }
    total += contigs_[contig_idx].record_count;
  }
  return total;
}

IteratorPtr FileIndex::query(int tid, std::int64_t begin, std::int64_t end) const {
  // htslib 1.16 turns the end into a bin number in an int; ends much past
  // 2^44 overflow it and send hts_itr_query on a walk of billions of bins.
  const std::int64_t capped_end = std::min<std::int64_t>(end, largest_query_end);
  if (tid < 0 || begin >= capped_end) return nullptr;
  if (tabix_) return IteratorPtr(tbx_itr_queryi(tabix_, tid, begin, capped_end));
  return IteratorPtr(bcf_itr_queryi(index_, tid, begin, capped_end));
}

void throw_missing_index(const std::string& path, htsFile* handle, const std::string& purpose) {
  const htsFormat* format = hts_get_format(handle);
  std::string fix;
  if (format->format == bcf) {
    fix = "make one with `bcftools index " + path + "`";
  } else if (format->compression == bgzf) {
    fix = "make one with `tabix -p vcf " + path + "` (or `bcftools index " + path + "`)";
  } else {
    fix = "only bgzip-compressed VCF and BCF files can be indexed: `bgzip " + path +
          "` then `tabix -p vcf " + path + ".gz`";
  }
  throw Error(ExitCode::genotype_input, path,
              purpose + " needs the file's index (.tbi or .csi beside it), and none was found",
              fix);
}

IndexedFile::IndexedFile(const std::string& path, const std::string& purpose) {
  errno = 0;
  handle.reset(hts_open(path.c_str(), "r"));
  if (!handle) {
    throw Error(ExitCode::genotype_input, path,
                std::string("cannot open the genotype file") +
                    (errno ? std::string(" (") + std::strerror(errno) + ")" : std::string()),
                "check the path and that the file is readable");
  }
  const htsFormat* format = hts_get_format(handle.get());
  if (format->format != vcf && format->format != bcf) {
    throw Error(ExitCode::genotype_input, path, "not a VCF or BCF file",
                "give a bgzip-compressed VCF or BCF file with its index");
  }
  header.reset(bcf_hdr_read(handle.get()));
  if (!header) {
    throw Error(ExitCode::genotype_input, path + ", header", "htslib could not parse the VCF header",
                "check the ## lines and the #CHROM line, e.g. with `bcftools view -h`");
  }
  index = FileIndex::load(path, handle.get(), header.get());
  if (!index) throw_missing_index(path, handle.get(), purpose);
}

std::vector<GenomicRegion> merge_regions(const std::vector<GenomicRegion>& regions) {
  std::vector<std::string> contig_order;
  std::unordered_map<std::string, std::vector<GenomicRegion>> by_contig;
  for (const GenomicRegion& region : regions) {
    auto [found, inserted] = by_contig.try_emplace(region.contig);
    if (inserted) contig_order.push_back(region.contig);
    found->second.push_back(region);
  }
  std::vector<GenomicRegion> merged;
  for (const std::string& contig : contig_order) {
    std::vector<GenomicRegion>& pieces = by_contig[contig];
    std::sort(pieces.begin(), pieces.end(), [](const GenomicRegion& left, const GenomicRegion& right) {
      return left.first != right.first ? left.first < right.first : left.last < right.last;
    });
    const std::size_t contig_start = merged.size();
    for (const GenomicRegion& piece : pieces) {
      if (piece.last < piece.first) continue;  // holds no position
      // POS semantics: [a, b] and [b + 1, c] cover the same records as [a, c].
      const bool joins_previous =
          merged.size() > contig_start && piece.first - 1 <= merged.back().last;
      if (joins_previous) {
        merged.back().last = std::max(merged.back().last, piece.last);
      } else {
        merged.push_back(piece);
      }
    }
  }
  return merged;
}

}  // namespace tamis::genotype_detail
