// Streaming VCF / VCF.gz / BCF input. htslib is used here and in the output
// writer only; everything downstream sees plain dosages.
#pragma once

#include <cstddef>
#include <cstdint>
#include <functional>
#include <limits>
#include <memory>
#include <optional>
#include <string>
#include <vector>

namespace tamis {

enum class DosageField { automatic, ds, gp, gt };

const char* dosage_field_name(DosageField field);  // "auto", "DS", "GP", "GT"

// One tested ALT allele of one record. A record with k ALT alleles yields k sites.
struct VariantSite {
  std::string chromosome;  // contig name as in the file
  std::int64_t position = 0;  // 1-based
  std::string id;          // the VCF ID column ("." when absent)
  std::string ref;
  std::string alt;         // the tested ALT allele
  int allele_index = 1;    // 1-based index of `alt` among the ALT alleles
  int alt_count = 1;       // number of ALT alleles in the record
  std::size_t file_index = 0;
  std::uint64_t record_number = 0;  // 1-based record number within its file
  DosageField source = DosageField::gt;  // the FORMAT field the dosages came from
  bool has_hard_calls = false;  // the record has GT, so ploidy and diploid_calls are filled
};

// Decoded dosages for a run of sites, site-major: the dosage of site v for
// genotype sample s is dosages[v * sample_count + s]; NaN marks a missing value.
struct DosageBlock {
  std::size_t sample_count = 0;
  std::vector<VariantSite> sites;
  std::vector<double> dosages;
  // Site-major like dosages, filled for sites with has_hard_calls: the number
  // of called alleles in the sample's GT (0 when the call is missing; "0/."
  // has 1), and for a fully called diploid GT the count of the tested allele
  // (0, 1, 2), else -1. Always the same size as dosages: sites without hard
  // calls hold ploidy 0 and diploid_calls -1.
  std::vector<std::uint8_t> ploidy;
  std::vector<std::int8_t> diploid_calls;

  std::size_t size() const { return sites.size(); }
  const double* site_dosages(std::size_t site_idx) const {
    return dosages.data() + site_idx * sample_count;
  }
  const std::uint8_t* site_ploidy(std::size_t site_idx) const {
    return ploidy.data() + site_idx * sample_count;
  }
  const std::int8_t* site_diploid_calls(std::size_t site_idx) const {
    return diploid_calls.data() + site_idx * sample_count;
  }
  void clear() {
    sites.clear();
    dosages.clear();
    ploidy.clear();
    diploid_calls.clear();
  }
};

// Records as read from the files, decoded later, possibly on another thread.
class RecordBatch {
 public:
  RecordBatch();
  ~RecordBatch();
  RecordBatch(RecordBatch&&) noexcept;
  RecordBatch& operator=(RecordBatch&&) noexcept;

  std::size_t size() const;

  // Decodes every record into one site per ALT allele (appending to `out`,
  // after setting out.sample_count). Thread-safe across distinct batches.
  // VCF records are still text here: they are parsed now, so a record that
  // htslib cannot parse is reported by decode, not by read_batch. Throws
  // tamis::Error (genotype_input) naming the file, the record number and
  // chrom:pos for such a record or a malformed value: a bad number in DS/GP,
  // the wrong number of values, an unparsable GT.
  void decode(DosageBlock& out) const;

  struct Impl;

 private:
  friend class GenotypeReader;
  std::unique_ptr<Impl> impl_;
};

// A stretch of one contig, 1-based and inclusive. A record belongs to a
// region when its POS lies in [first, last]; how far its REF reaches does not
// matter, so regions that touch but do not overlap never share a record.
struct GenomicRegion {
  std::string contig;
  std::int64_t first = 1;
  std::int64_t last = std::numeric_limits<std::int64_t>::max();
};

// Reads "CHR", "CHR:FROM-TO", "CHR:FROM-" or "CHR:POS"; the numbers may hold
// thousands separators ("chr2:1,000,000-2,000,000"). The contig is everything
// before the last ':'. Throws tamis::Error (usage) for anything else, or when
// FROM is below 1 or TO below FROM.
GenomicRegion parse_region(const std::string& text);

// Shard `shard` (1-based) of `shard_count` contiguous parts of the genome that
// `paths` hold, in file order then position, each holding near-equal numbers
// of records as estimated from the files' .tbi/.csi indexes. Reading the
// regions of every shard, one after the other, reads every record exactly
// once. A shard is never an empty list (which would mean "everything"), but
// its regions may hold no record when there are more shards than records;
// the one exception is files that hold no record at all, where every shard
// is the empty list (reading them whole reads nothing). Cut points are
// estimated from the index alone (per-contig counts, and inside a contig the
// compressed bytes of index windows), so shard sizes are near-equal, not
// equal; the same files always give the same plan.
// Throws tamis::Error (genotype_input) for a file without an index, and
// (usage) for a shard outside 1..shard_count.
//
// `move_cut`, when given, may move each cut (the contig and the first
// position of the shard after it) further along its contig, never back: a
// scan with variant sets moves cuts out of the sets, so that each set lies
// whole in one shard. It must return the same for the same arguments.
using ShardCutMover = std::function<std::int64_t(const std::string& contig, std::int64_t first_position)>;
std::vector<GenomicRegion> plan_shard(const std::vector<std::string>& paths, int shard,
                                      int shard_count, const ShardCutMover& move_cut = {});

struct GenotypeReaderOptions {
  std::vector<std::string> paths;
  DosageField field = DosageField::automatic;
  int io_threads = 0;  // htslib decompression threads per file (0: none)
  // The dosage of a haploid GT call of the tested allele: 1 (the allele
  // count) or 2 (a hemizygous call weighs as a homozygous diploid one). Only
  // GT-derived dosages are scaled; DS and GP are taken as given.
  int haploid_dosage = 1;
  // When not empty, only records whose POS lies in one of these regions are
  // read, through each file's .tbi/.csi index. Overlapping or touching regions
  // of one contig are merged first, so no record is read twice; contigs are
  // visited in the order they first appear here, and each contig's regions
  // from left to right. A contig a file does not have yields nothing from it.
  std::vector<GenomicRegion> regions;
};

class GenotypeReader {
 public:
  // Opens every file and checks that each lists the same samples in the same
  // order as the first; the error names the first file that differs and the
  // first differing sample. Also rejects duplicate sample IDs (both positions
  // named) and a requested FORMAT field that a file's header does not declare.
  // With regions, loads every file's index and throws tamis::Error
  // (genotype_input) for a file without one, saying how to make it;
  // haploid_dosage other than 1 or 2 throws tamis::Error (usage).
  explicit GenotypeReader(const GenotypeReaderOptions& options);
  ~GenotypeReader();
  GenotypeReader(const GenotypeReader&) = delete;
  GenotypeReader& operator=(const GenotypeReader&) = delete;

  const std::vector<std::string>& sample_ids() const;
  const std::vector<std::string>& paths() const;
  // The field used for file `file_index` once `auto` is resolved: DS if the
  // header declares it, else GP, else GT.
  DosageField resolved_field(std::size_t file_index) const;
  // Total records, when every file has a .tbi/.csi index and no regions are
  // set; else nothing (an index does not say how many records a region holds).
  std::optional<std::uint64_t> indexed_record_count() const;

  // Serial: reads up to `max_records` records into `batch` (replacing its
  // contents), moving on to the next file at the end of one. A batch is
  // cheapest when reused: it keeps its buffers from one call to the next.
  // With regions,
  // a site's record_number counts the records read from its file through
  // the regions, not its place in the whole file. Returns the
  // number read; 0 once every file is exhausted. Throws tamis::Error
  // (genotype_input) for a truncated or corrupt file, naming the last
  // position reached (with decompression threads, htslib notices damage a
  // few blocks ahead, so the record named can come a little before it).
  std::size_t read_batch(RecordBatch& batch, std::size_t max_records);

  // Thread-safe, also while read_batch runs: inflates a piece of the input
  // that read_batch will soon reach (BCF files read whole), so that worker
  // threads take that work off the serial reader; true when there was some.
  // Without such calls read_batch inflates as it goes.
  bool inflate_ahead();

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace tamis
