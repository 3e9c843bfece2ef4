// Fuzz target: BCF records read through the prefetched BGZF stream and the
// record checks of src/genotypes/bcf_records.cpp, then decoded. The input's
// first byte picks the dosage field (its value modulo 4: auto, DS, GP, GT);
// the rest becomes the record bytes that follow a fixed BCF header (three
// samples; GT, DS, GP declared; one INFO field; two contigs), written as
// BGZF with htslib and read through GenotypeReader::read_batch and
// RecordBatch::decode. A tamis::Error is the expected answer to bad input; a
// crash, a sanitizer report, a leak, a hang or any other exception is a bug.
#include <htslib/bgzf.h>

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <string>

#include "fuzz_input_file.hpp"
#include "tamis/errors.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis::fuzzing {
namespace {

constexpr std::size_t kRecordsPerBatch = 3;
constexpr std::size_t kSampleCount = 3;

// PASS comes first so that the dictionary is the one a BCF writer makes:
// PASS 0, AF 1, GT 2, DS 3, GP 4; contigs 1 and chrX are 0 and 1. The seed
// corpus (test_data/fuzz/bcf_records/) holds records written by bcftools
// 1.16 for this header.
const char kHeaderText[] =
    "##fileformat=VCFv4.3\n"
    "##FILTER=<ID=PASS,Description=\"All filters passed\">\n"
    "##contig=<ID=1,length=1000000>\n"
    "##contig=<ID=chrX,length=1000000>\n"
    "##INFO=<ID=AF,Number=A,Type=Float,Description=\"ALT allele frequency\">\n"
    "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n"
    "##FORMAT=<ID=DS,Number=A,Type=Float,Description=\"Expected ALT allele count\">\n"
    "##FORMAT=<ID=GP,Number=G,Type=Float,Description=\"Genotype probabilities\">\n"
    "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT\tS1\tS2\tS3\n";

// "BCF\2\2", the text's length with its closing NUL, then the text
// (hts-specs VCFv4.3, section 6.2).
std::string bcf_header_bytes() {
  const std::uint32_t length = sizeof kHeaderText;  // counts the NUL
  std::string bytes("BCF\2\2", 5);
  for (int byte_idx = 0; byte_idx < 4; ++byte_idx) bytes += static_cast<char>(length >> (8 * byte_idx));
  bytes.append(kHeaderText, sizeof kHeaderText);
  return bytes;
}

DosageField field_choice(std::uint8_t byte) {
  const DosageField fields[] = {DosageField::automatic, DosageField::ds, DosageField::gp, DosageField::gt};
  return fields[byte % 4];
}

void write_bgzf(const std::string& path, const std::string& stream) {
  BGZF* file = bgzf_open(path.c_str(), "w1");
  if (!file || bgzf_write(file, stream.data(), stream.size()) != static_cast<ssize_t>(stream.size()) ||
      bgzf_close(file) != 0) {
    report_broken_invariant("cannot write the input as BGZF");
  }
}

void check_block(const DosageBlock& block, std::uint64_t* last_record_number) {
  if (block.sample_count != kSampleCount || block.dosages.size() != block.size() * kSampleCount ||
      block.ploidy.size() != block.dosages.size() || block.diploid_calls.size() != block.dosages.size()) {
    report_broken_invariant("the block does not hold one value per sample and site");
  }
  for (std::size_t site_idx = 0; site_idx < block.size(); ++site_idx) {
    const VariantSite& site = block.sites[site_idx];
    if (site.file_index != 0) {
      report_broken_invariant("a site describes its record wrongly");
    }
    if (site.record_number < *last_record_number || site.record_number > *last_record_number + 1) {
      report_broken_invariant("record numbers do not count the records in order");
    }
    *last_record_number = site.record_number;
    check_site_dosages(block, site_idx);
  }
}

void read_and_decode(const std::string& path, DosageField field) {
  GenotypeReaderOptions options;
  options.paths = {path};
  options.field = field;
  GenotypeReader reader(options);
  if (reader.sample_ids().size() != kSampleCount) report_broken_invariant("the header's samples were lost");
  RecordBatch batch;
  std::uint64_t last_record_number = 0;
  while (reader.read_batch(batch, kRecordsPerBatch) > 0) {
    // What the scan's worker threads do between blocks of work, here on
    // the reading thread: it must leave the records read unchanged.
    reader.inflate_ahead();
    DosageBlock block;
    batch.decode(block);
    check_block(block, &last_record_number);
  }
}

}  // namespace
}  // namespace tamis::fuzzing

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  using namespace tamis;
  static const fuzzing::FuzzInputFile input(".bcf");
  static const std::string header = fuzzing::bcf_header_bytes();
  if (size == 0) return 0;
  const DosageField field = fuzzing::field_choice(data[0]);
  fuzzing::write_bgzf(input.path(), header + std::string(reinterpret_cast<const char*>(data) + 1, size - 1));
  try {
    fuzzing::read_and_decode(input.path(), field);
  } catch (const Error&) {
  }
  return 0;
}
