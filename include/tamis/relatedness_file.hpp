// PREFIX.relatedness.tsv.gz, a format of our own: BGZF, tab-separated, one
// header line; columns sample_1, sample_2, relatedness, then the pair's
// marker count and its relationship degree. One row per kept pair and one
// per sample for its diagonal (sample_1 = sample_2). `scan` reads any file
// whose first three columns are these, compressed or not, so a matrix made
// elsewhere (from a pedigree, say) serves as well.
//
// A `relatedness --part K/N` run writes PREFIX.relatedness.partK-of-N.tsv.gz;
// beside every file written here lies FILE-meta.yaml, which names the part
// and the fingerprint of the run's inputs, so that the parts of one matrix
// can be checked to belong together.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <vector>

#include "tamis/relatedness.hpp"

namespace tamis {

// The column names, in file order.
const std::vector<std::string>& relatedness_columns();

// PREFIX.relatedness.tsv.gz for a whole matrix (part_count 1), else
// PREFIX.relatedness.partK-of-N.tsv.gz.
std::string relatedness_file_path(const std::string& prefix, int part, int part_count);

// Writes entries (indices into sample_ids) as rows, one at a time, each
// labelled with its degree ("self" on the diagonal), under a temporary name
// that commit() renames (the destructor removes an uncommitted file).
// `sample_ids` must outlive the writer. Throws tamis::Error (output).
class RelatednessFileWriter {
 public:
  RelatednessFileWriter(const std::string& path, const std::vector<std::string>& sample_ids);
  ~RelatednessFileWriter();
  RelatednessFileWriter(const RelatednessFileWriter&) = delete;
  RelatednessFileWriter& operator=(const RelatednessFileWriter&) = delete;

  void add(const RelatednessEntry& entry);
  void commit();
  std::uint64_t rows() const { return rows_; }

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
  std::uint64_t rows_ = 0;
};

// All of `entries` at once.
void write_relatedness_file(const std::string& path, const std::vector<std::string>& sample_ids,
                            const std::vector<RelatednessEntry>& entries);

// What FILE-meta.yaml records about the run that wrote FILE.
struct RelatednessProvenance {
  std::size_t sample_count = 0;
  std::uint64_t marker_count = 0;
  int part = 1;
  int part_count = 1;
  double keep_above = 0.0;
  std::string fingerprint;  // of the inputs and options; the same for every part of one run
};

// Writes `data_path`-meta.yaml (temporary name, then renamed), with the md5
// of the committed data file.
void write_relatedness_sidecar(const std::string& data_path, const RelatednessProvenance& provenance);

struct RelatednessFileContents {
  std::vector<std::string> sample_ids;  // every ID the files name, in first-seen order
  std::vector<double> diagonal;         // per ID; NaN where the files give no diagonal row (then 1)
  std::vector<RelatednessPair> pairs;   // indices into sample_ids, first < second, each pair once; zeros left out
  std::string checksum;                 // of the files' contents, for the run fingerprint
};

// Reads one matrix from one file or from the complete set of parts of a
// `relatedness --part K/N` run: any file whose header's first three
// columns are sample_1, sample_2, relatedness (tab-separated; further
// columns ignored), BGZF, gzip or plain text. A file is a part when its
// sidecar says so (or, without a sidecar, its name); parts must form whole
// sets with one fingerprint. A file without either stands alone; several
// such files are pieces of one matrix. Throws tamis::Error (results_input)
// naming the file and line, with a fix, for: an empty file or a missing
// header, a row with fewer than three fields or an empty ID, a relatedness
// that is not a finite number, a pair listed twice (in either order, in
// one file or across files), a diagonal row given twice or not positive, a
// part missing or given twice, parts of different runs, and a file changed
// since its sidecar was written.
RelatednessFileContents read_relatedness_files(const std::vector<std::string>& paths);

}  // namespace tamis
