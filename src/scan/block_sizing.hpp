// How the pipelines size their reading (defined in scan.cpp, shared with
// the relatedness pipeline).
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"

namespace tamis {

// htslib's decompression threads beside `scan_threads` workers.
int decompression_threads_for(int scan_threads);

// The reader of a pipeline with `threads` workers.
GenotypeReaderOptions reader_options_for(const std::vector<std::string>& paths, DosageField field, int threads,
                                         const std::vector<GenomicRegion>& regions, int haploid_dosage);

// Records per block that keep a block's dosages in a core's cache.
std::size_t records_per_block_for(std::size_t sample_count);

}  // namespace tamis
