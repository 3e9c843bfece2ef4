// Decoding one htslib record (from BCF, or from VCF text that the fast
// decoder leaves to htslib's parser) into sites of a DosageBlock.
#pragma once

#include <htslib/vcf.h>

#include <cstddef>

#include "genotypes/dosage_rules.hpp"
#include "genotypes/record_batch_impl.hpp"

namespace tamis::genotype_detail {

// The header ids of the FORMAT tags decoding looks for; -1 when undeclared.
struct FormatTagIds {
  int dosage = -1;    // the tag named by the file's dosage field
  int genotype = -1;  // GT
};

// Unpacks `record` and appends one site per ALT allele to `out` (whose
// sample_count must be set). Throws tamis::Error (genotype_input) naming the
// file, record number and chrom:pos for a malformed value.
void decode_htslib_record(const RecordOrigin& origin, bcf1_t* record, std::size_t sample_count,
                          const FormatTagIds& tags, DosageBlock& out);

// Grows out's dosages, ploidy and diploid_calls to cover every site (new
// values NaN, 0 and -1) and returns the columns of the sites from first_site.
SiteColumns reserve_site_columns(DosageBlock& out, std::size_t first_site);

}  // namespace tamis::genotype_detail
