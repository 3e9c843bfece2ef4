// PREFIX.relatedness.tsv.gz, a format of our own: BGZF, tab-separated, one
// header line; columns sample_1, sample_2, relatedness, then the pair's
// marker count and its relationship degree. One row per kept pair and one
// per sample for its diagonal (sample_1 = sample_2). `scan` reads any file
// whose first three columns are these, compressed or not, so a matrix made
// elsewhere (from a pedigree, say) serves as well.
#pragma once

#include <string>
#include <vector>

#include "tamis/relatedness.hpp"

namespace tamis {

struct RelatednessFileContents {
  std::vector<std::string> sample_ids;  // every ID the files name, in first-seen order
  std::vector<double> diagonal;         // per ID; NaN where the files give no diagonal row (then 1)
  std::vector<RelatednessPair> pairs;   // indices into sample_ids, first < second, each pair once
  std::string checksum;                 // of the files' contents, for the run fingerprint
};

// Reads one matrix from one file or from the complete set of parts of a
// `relatedness --part K/N` run. Throws tamis::Error naming file and line for
// a pair listed twice, a non-number, a missing or repeated part, ...
RelatednessFileContents read_relatedness_files(const std::vector<std::string>& paths);

}  // namespace tamis
