// What a RecordBatch holds: htslib records plus where each came from. Shared
// by the reader (which fills batches) and the decoder (which empties them).
#pragma once

#include <htslib/kstring.h>
#include <htslib/vcf.h>

#include <cstdint>
#include <memory>
#include <new>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"

namespace tamis {

namespace genotype_detail {

class VcfTextDecoder;

// Everything decoding needs to know about a file. Decoding never touches the
// htslib header, which the reading thread may still extend (htslib adds
// undeclared contigs and tags to it), so the FORMAT tag is resolved to its
// numeric id once, when the file is opened.
struct FileInfo {
  std::string path;
  std::size_t file_index = 0;
  DosageField field = DosageField::gt;
  int tag_id = -1;  // the header's id of the FORMAT tag named by `field`
  int gt_tag_id = -1;  // the header's id of FORMAT/GT, -1 when undeclared
  int haploid_dosage = 1;  // GT dosage of one copy in a haploid call
  std::shared_ptr<const std::vector<std::string>> sample_ids;
  // VCF text only: decodes the raw lines the reader stores (null for BCF).
  std::shared_ptr<const VcfTextDecoder> text_decoder;
};

struct RecordOrigin {
  std::shared_ptr<const FileInfo> file;
  std::uint64_t record_number = 0;
  std::string chromosome;
};

}  // namespace genotype_detail

struct RecordBatch::Impl {
  // Pools that only grow: records and lines are reused from one batch to
  // the next so that their buffers are kept. A record of a BCF file is an
  // htslib record; one of a VCF file is its line of text, parsed later.
  std::vector<bcf1_t*> records;
  std::vector<kstring_t> lines;
  std::vector<genotype_detail::RecordOrigin> origins;
  std::size_t count = 0;
  std::size_t sample_count = 0;

  Impl() = default;
  Impl(const Impl&) = delete;
  Impl& operator=(const Impl&) = delete;
  ~Impl() {
    for (bcf1_t* record : records) {
      if (record) bcf_destroy(record);
    }
    for (kstring_t& line : lines) free(line.s);
  }

  void reserve(std::size_t record_count) {
    if (records.size() < record_count) records.resize(record_count, nullptr);
    if (lines.size() < record_count) lines.resize(record_count, kstring_t{0, 0, nullptr});
    if (origins.size() < record_count) origins.resize(record_count);
  }
  bcf1_t* record_at(std::size_t record_idx) {
    if (!records[record_idx]) {
      records[record_idx] = bcf_init();
      if (!records[record_idx]) throw std::bad_alloc();
    }
    return records[record_idx];
  }
};

}  // namespace tamis
