// Results out: GWAS-SSF rows, BGZF files written under a temporary name and
// renamed only when complete, tabix indexes, the metadata sidecar.
#pragma once

#include <cstddef>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace tamis {

// ---- rows ----------------------------------------------------------------

// One results line. Optional fields are written as "#NA" when empty.
struct ResultRow {
  std::string chromosome;  // already mapped (see map_chromosome)
  std::int64_t position = 0;
  std::string effect_allele;  // the ALT allele
  std::string other_allele;   // the REF allele
  double beta = 0.0;
  double standard_error = 0.0;
  double effect_allele_frequency = 0.0;
  double log_p = 0.0;  // ln of the reported p_value
  std::string variant_id;
  std::string rsid;  // empty: #NA
  std::size_t n = 0;
  std::optional<double> info;
  std::string test;  // "score", "lrt", ...
  double score_chisq = 0.0;
  double score_log_p = 0.0;
  std::optional<double> wald_chisq, wald_log_p, lrt_chisq, lrt_log_p, log10p_spread;
  double mac = 0.0;
  double call_rate = 0.0;
  std::optional<double> hwe_log_p;  // ln p of the Hardy-Weinberg exact test on the hard calls
  std::optional<std::size_t> n_cases;
  // Columns some analyses add after the standard ones (interaction tests):
  // their values already formatted, each preceded by a tab.
  std::string extra_fields;
};

// The column names, in file order; the first eight are the GWAS-SSF mandatory set.
const std::vector<std::string>& result_columns();
std::string result_header_line();  // the names joined by tabs, with '\n'
// The same with `extra_columns` after the standard ones.
std::string result_header_line(const std::vector<std::string>& extra_columns);
// A number as the standard columns write it ("%.9g"; "#NA" when not finite).
void append_result_number(double value, std::string& out);
void append_result_row(const ResultRow& row, std::string& out);  // one line with '\n'

// p from ln p: plain "%.9g" when representable, else mantissa and exponent
// from the logarithm ("3.2e-1088"); never "0".
std::string format_p_value(double log_p);

// GWAS-SSF chromosome codes: "chr" prefix removed, 1-22, X=23, Y=24, MT/M=25.
// Returns nothing for a contig that has no code.
std::optional<std::string> map_chromosome_ssf(const std::string& contig);

// ---- set rows (scan --sets) ------------------------------------------------

// One set's line in PREFIX.TRAIT.sets.tsv.gz. ln p values throughout.
struct SetResultRow {
  std::string set;
  std::string chromosome;  // as in the results file
  std::int64_t start = 0;  // 1-based, inclusive: the set's extent as its file gives it, else its variants' span
  std::int64_t end = 0;
  std::size_t n_variants = 0;  // variants tested, before any collapsing
  double total_mac = 0.0;
  double burden_log_p = 0.0, variance_log_p = 0.0, optimal_log_p = 0.0, cauchy_log_p = 0.0, overall_log_p = 0.0;
  double burden_beta = 0.0, burden_se = 0.0, burden_chisq = 0.0;
  std::string burden_test;  // "score" or "score_spa"
  double variance_q = 0.0;
  std::string variance_method;  // how the mixture tail was reached
  double optimal_rho = 0.0;
  double optimal_min_log_p = 0.0;
  std::string top_variant;  // the variant with the smallest single-variant p
  double top_variant_log_p = 0.0;
  std::size_t n_collapsed = 0;  // ultra-rare variants summed into one
  std::string weights;
  std::size_t n = 0;
  std::optional<std::size_t> n_cases;
};

const std::vector<std::string>& set_result_columns();
std::string set_result_header_line();
void append_set_result_row(const SetResultRow& row, std::string& out);

// ---- files ---------------------------------------------------------------

// tabix_sets: sequence column 2, start column 3, end column 4 (set rows).
enum class IndexKind { none, tabix_results, tabix_vcf, tabix_sets };

// A BGZF text file written under "<final>.partial" and renamed on commit.
// The destructor removes the temporary file unless commit() succeeded, and
// the temporary name is registered so that a signal handler can remove it.
class BgzfTextFile {
 public:
  explicit BgzfTextFile(std::string final_path);
  ~BgzfTextFile();
  struct ResumeTag {};
  BgzfTextFile(std::string final_path, std::uint64_t compressed_bytes, ResumeTag);
  BgzfTextFile(const BgzfTextFile&) = delete;
  BgzfTextFile& operator=(const BgzfTextFile&) = delete;

  // Continues an interrupted file: "<final>.partial" is cut back to
  // `compressed_bytes` (a size that checkpoint() returned) and appended to.
  static std::unique_ptr<BgzfTextFile> resume(std::string final_path, std::uint64_t compressed_bytes);

  void write(std::string_view text);  // throws tamis::Error (output) on a write failure
  // Writes whole results rows ("CHROM\tPOS\t...\n"), indexing them as they
  // go, so that commit(IndexKind::tabix_results) need not read the file back.
  // Text written with write() after rows, or rows that do not index (out of
  // order, no position), leave the index to commit as before.
  void write_rows(std::string_view rows);
  // Whether commit(IndexKind::tabix_results) will use the index built so far.
  bool indexes_rows() const;
  // Ends the current BGZF block and flushes it to disk; returns the compressed
  // size so far, a point from which resume() can continue.
  std::uint64_t checkpoint();
  // Leaves the temporary file in place when a signal stops the run, so that a
  // later run can resume it (it is still removed when an error unwinds).
  void keep_on_interrupt();
  // Closes the file, builds its index (tabix_results: sequence column 1,
  // position column 2, one header line skipped; tabix_vcf: the VCF preset)
  // and renames the data file and the index to their final names.
  void commit(IndexKind index);
  const std::string& final_path() const { return final_path_; }
  const std::string& temporary_path() const { return temporary_path_; }

 private:
  void write_bytes(std::string_view text);
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::string final_path_;
  std::string temporary_path_;
};

// A plain text file with the same temporary-name discipline.
class PlainTextFile {
 public:
  explicit PlainTextFile(std::string final_path);
  ~PlainTextFile();
  PlainTextFile(const PlainTextFile&) = delete;
  PlainTextFile& operator=(const PlainTextFile&) = delete;

  void write(std::string_view text);
  void commit();
  const std::string& final_path() const { return final_path_; }

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::string final_path_;
  std::string temporary_path_;
};

// Removes every registered temporary file. Async-signal-safe (unlink only).
void remove_registered_temporaries() noexcept;

// Throws tamis::Error (output) unless `prefix`'s directory exists and a file
// can be created there.
void check_output_prefix_writable(const std::string& prefix);

// Hex md5 of a file's bytes.
std::string md5_hex_of_file(const std::string& path);

// ---- GWAS-SSF metadata sidecar -------------------------------------------

struct SidecarFields {
  std::string data_file_name;  // base name of the data file
  std::string genome_assembly;  // "#NA"-free: empty writes "unknown"
  std::string trait_description;
  std::size_t sample_size = 0;
  std::optional<std::size_t> case_count, control_count;
  std::string software_version;
  std::vector<std::string> adjusted_covariates;
  // Extra "key: value" lines appended verbatim (shards, fingerprints, ...).
  std::vector<std::pair<std::string, std::string>> extra;
};

// Writes "<data_path>-meta.yaml" (temporary name, then renamed); computes
// data_file_md5sum from the committed data file.
void write_metadata_sidecar(const std::string& data_path, const SidecarFields& fields);

// Reads a sidecar that write_metadata_sidecar wrote: the known keys go to
// their fields, every other top-level key to `extra`; data_md5 receives
// data_file_md5sum. Throws tamis::Error (results_input) naming the line of
// anything it cannot read.
SidecarFields read_metadata_sidecar(const std::string& sidecar_path, std::string* data_md5 = nullptr);

// Extra sidecar keys of a scan's results: the run's fingerprint always, and
// a shard's place and ranges, which `merge` reads back.
inline constexpr const char* kShardKey = "tamis_shard";
inline constexpr const char* kShardRangesKey = "tamis_shard_ranges";
inline constexpr const char* kFingerprintKey = "tamis_run_fingerprint";
// The variants a scan conditioned on (--condition-on), as given.
inline constexpr const char* kConditionedOnKey = "tamis_conditioned_on";
// The relatedness matrix of a mixed-model scan: its files and their md5.
inline constexpr const char* kRelatednessKey = "tamis_relatedness";
// A mixed-model scan's null fit of the trait (model, variance, iterations).
inline constexpr const char* kNullModelKey = "tamis_null_model";

}  // namespace tamis
