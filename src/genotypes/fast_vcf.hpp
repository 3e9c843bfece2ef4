// Decoding VCF text lines without htslib's general parser.
//
// The reader stores each VCF record as its raw line; decoding (on worker
// threads) goes through decode_vcf_text_record. A specialised decoder reads
// the line in one pass, picking out GT and the dosage field (DS or GP) from
// any FORMAT layout, and checks the rest of the line only as far as needed to
// know that htslib would accept it. Whenever the line holds anything it does
// not fully understand (an undeclared tag, an unusual number, a value htslib
// would reject or that tamis would report) it declines, and the line goes to
// htslib's parser (vcf_parse) and the same decoding as BCF records. So both
// paths give the same sites, dosages, calls and errors; the differential
// tests hold them to that.
//
// Numbers: htslib stores DS and GP as float, parsed as the nearest double
// (strtod, or its own exact shortcut for short decimals) then rounded to
// float; the fast decoder computes exactly that value.
#pragma once

#include <cstdint>
#include <memory>
#include <string>
#include <string_view>

#include "tamis/genotype_reader.hpp"

struct bcf_hdr_t;

namespace tamis::genotype_detail {

struct FileInfo;
struct RecordOrigin;

enum class DecodePath {
  fast,      // the specialised decoder decoded the line
  general,   // htslib's parser did
  declined,  // DecodeMode::fast_only, and the specialised decoder declined
};

enum class DecodeMode { automatic, fast_only, general_only };

// What decoding a file's lines needs, taken from its header once.
class VcfTextDecoder {
 public:
  // `header` is the file's header as read; it is copied, and decoding never
  // looks at the original again. `field` is DS, GP or GT (not auto).
  VcfTextDecoder(const bcf_hdr_t* header, DosageField field, int haploid_dosage);
  ~VcfTextDecoder();
  VcfTextDecoder(const VcfTextDecoder&) = delete;
  VcfTextDecoder& operator=(const VcfTextDecoder&) = delete;

  struct Impl;
  const Impl& impl() const { return *impl_; }

 private:
  std::unique_ptr<Impl> impl_;
};

// Decodes one data line of a VCF (without its line break) into one site per
// ALT allele, appended to `out` (whose sample_count must be that of the
// file). `origin.file->text_decoder` must be set; origin.chromosome is not
// used (the line's CHROM is). Throws tamis::Error (genotype_input) naming the
// file, the record number and chrom:pos for a record htslib cannot parse or
// a malformed value. Thread-safe: many threads may decode lines of one file.
// With DecodeMode::fast_only nothing is thrown: a line the specialised
// decoder declines leaves `out` unchanged and returns DecodePath::declined.
DecodePath decode_vcf_text_record(const RecordOrigin& origin, std::string_view line, DosageBlock& out,
                                  DecodeMode mode = DecodeMode::automatic);

// For tests and fuzzers: the FileInfo (text decoder included) of a VCF file
// named `path` whose header is `header_text` (the ## lines and the #CHROM
// line). Throws tamis::Error (genotype_input) when htslib rejects the header.
std::shared_ptr<const FileInfo> make_text_file_info(const std::string& header_text,
                                                    const std::string& path, DosageField field,
                                                    int haploid_dosage = 1);

// For tests and fuzzers: the number of samples of `file`.
std::size_t text_sample_count(const FileInfo& file);

// For tests and fuzzers: decode_vcf_text_record for record `record_number`
// of `file` (from make_text_file_info).
DecodePath decode_vcf_text_record(const std::shared_ptr<const FileInfo>& file,
                                  std::uint64_t record_number, std::string_view line,
                                  DosageBlock& out, DecodeMode mode = DecodeMode::automatic);

}  // namespace tamis::genotype_detail
