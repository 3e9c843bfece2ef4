// Streaming VCF / VCF.gz / BCF input. htslib is used here and in the output
// writer only; everything downstream sees plain dosages.
#pragma once

#include <cstddef>
#include <cstdint>
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
  // of called alleles in the sample's GT (0 when the call is missing), and for
  // a fully called diploid GT the count of the tested allele (0, 1, 2), else -1.
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
  // Throws tamis::Error (genotype_input) naming the file, the record number
  // and chrom:pos for a malformed value: a bad number in DS/GP, the wrong
  // number of values, an unparsable GT.
  void decode(DosageBlock& out) const;

  struct Impl;

 private:
  friend class GenotypeReader;
  std::unique_ptr<Impl> impl_;
};

struct GenotypeReaderOptions {
  std::vector<std::string> paths;
  DosageField field = DosageField::automatic;
  int io_threads = 0;  // htslib decompression threads per file (0: none)
};

class GenotypeReader {
 public:
  // Opens every file and checks that each lists the same samples in the same
  // order as the first; the error names the first file that differs and the
  // first differing sample. Also rejects duplicate sample IDs (both positions
  // named) and a requested FORMAT field that a file's header does not declare.
  explicit GenotypeReader(const GenotypeReaderOptions& options);
  ~GenotypeReader();
  GenotypeReader(const GenotypeReader&) = delete;
  GenotypeReader& operator=(const GenotypeReader&) = delete;

  const std::vector<std::string>& sample_ids() const;
  const std::vector<std::string>& paths() const;
  // The field used for file `file_index` once `auto` is resolved: DS if the
  // header declares it, else GP, else GT.
  DosageField resolved_field(std::size_t file_index) const;
  // Total records, when every file has a .tbi/.csi index; else nothing.
  std::optional<std::uint64_t> indexed_record_count() const;

  // Serial: reads up to `max_records` records into `batch` (replacing its
  // contents), moving on to the next file at the end of one. Returns the
  // number read; 0 once every file is exhausted. Throws tamis::Error
  // (genotype_input) for a truncated or corrupt file, naming the last
  // position reached.
  std::size_t read_batch(RecordBatch& batch, std::size_t max_records);

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace tamis
