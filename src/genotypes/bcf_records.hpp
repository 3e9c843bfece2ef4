// BCF records read from a prefetched BGZF stream, checked as they arrive.
#pragma once

#include <htslib/vcf.h>

#include "genotypes/bgzf_prefetch.hpp"

namespace tamis::genotype_detail {

// Reads the next record of a BCF stream positioned after its header, as
// bcf_read would: 0 for a record, -1 at the end of the data, -2 for damaged
// data or a record whose structure is malformed (a value running past its
// section, an unknown value type, a contig or tag id the header lacks, or a
// sample count other than the header's). Only records that pass are given
// to htslib's unpacking, which trusts the lengths it finds.
int read_bcf_record(PrefetchedBgzf& stream, const bcf_hdr_t* header, bcf1_t* record);

}  // namespace tamis::genotype_detail
