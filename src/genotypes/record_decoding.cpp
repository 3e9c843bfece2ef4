// Turning records into one dosage vector per ALT allele. Runs on worker
// threads: it reads only the batch's own records and immutable file state,
// never the reading thread's htslib header. BCF records arrive as htslib
// records; VCF text arrives as lines, decoded in fast_vcf.cpp.

// FORMAT values sit at any byte offset in htslib's buffers: read them byte
// by byte (htslib's documented switch), not through misaligned word loads,
// which are undefined behaviour and which UBSan rejects under clang.
#ifndef HTS_ALLOW_UNALIGNED
#define HTS_ALLOW_UNALIGNED 0
#endif
#include <htslib/hts_endian.h>
#include <htslib/vcf.h>

#include <algorithm>
#include <cassert>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <string_view>
#include <vector>

#include "common/vector_clones.hpp"
#include "genotypes/dosage_rules.hpp"
#include "genotypes/fast_vcf.hpp"
#include "genotypes/record_decoder.hpp"
#include "tamis/errors.hpp"

namespace tamis {

namespace genotype_detail {

namespace {

// BCF stores floats little-endian, as the host does: one unaligned load.
static_assert(__BYTE_ORDER__ == __ORDER_LITTLE_ENDIAN__, "BCF float decoding assumes a little-endian host");
inline float read_host_float(const std::uint8_t* at) {
  float value;
  std::memcpy(&value, at, sizeof value);
  return value;
}

// Samples per pass of the branch-free decoders: small enough that a missing
// value sends few samples to the slow path, large enough to vectorise.
constexpr std::size_t kSampleChunk = 16;

// A full diploid call of alleles 0 and 1: both encoded alleles are 2..5,
// (index + 1) << 1 | phased.
inline bool is_plain_diploid_pair(const std::uint8_t* pair) {
  return (static_cast<unsigned>(pair[0]) - 2u < 4u) & (static_cast<unsigned>(pair[1]) - 2u < 4u);
}

// "./." (or ".|."): both alleles encoded as missing, 0 or 1.
inline bool is_missing_diploid_pair(const std::uint8_t* pair) { return (pair[0] < 2u) & (pair[1] < 2u); }

// The pairs the branch-free GT pass decodes by itself.
inline bool is_fast_diploid_pair(const std::uint8_t* pair) {
  return is_plain_diploid_pair(pair) || is_missing_diploid_pair(pair);
}

// A DS value written as missing (".") or absent (end of vector): either way
// the sample has no dosage.
inline bool is_missing_dosage(const std::uint8_t* at) {
  std::uint32_t bits;
  std::memcpy(&bits, at, sizeof bits);
  // htslib's bcf_float_missing and bcf_float_vector_end (BCF 2.2, hts-specs
  // VCFv4.3 section 6.3.3), as constants so that the loops vectorise.
  return (bits == 0x7F800001u) | (bits == 0x7F800002u);
}

inline bool is_plain_dosage(float value) {
  // `&`, not `&&`: no branch, so the loops over samples vectorise.
  return (value >= 0.0f) & (static_cast<double>(value) <= diploid_dosage_limit);
}

enum class Slot { value, missing, vector_end };

// One value of a FORMAT field as stored by htslib (little-endian, with the
// BCF sentinels for missing values and for the end of a short vector).
Slot read_float_slot(const bcf_fmt_t& format, std::size_t sample_idx, int value_idx, double* value) {
  const uint8_t* at = format.p + sample_idx * format.size + value_idx * sizeof(float);
  const uint32_t bits = le_to_u32(at);
  if (bits == bcf_float_vector_end) return Slot::vector_end;
  if (bits == bcf_float_missing) return Slot::missing;
  *value = le_to_float(at);
  return std::isnan(*value) ? Slot::missing : Slot::value;
}

Slot read_int_slot(const bcf_fmt_t& format, std::size_t sample_idx, int value_idx, int32_t* value) {
  const uint8_t* sample = format.p + sample_idx * format.size;
  switch (format.type) {
    case BCF_BT_INT8: {
      const int8_t raw = le_to_i8(sample + value_idx);
      if (raw == bcf_int8_vector_end) return Slot::vector_end;
      if (raw == bcf_int8_missing) return Slot::missing;
      *value = raw;
      return Slot::value;
    }
    case BCF_BT_INT16: {
      const int16_t raw = le_to_i16(sample + value_idx * 2);
      if (raw == bcf_int16_vector_end) return Slot::vector_end;
      if (raw == bcf_int16_missing) return Slot::missing;
      *value = raw;
      return Slot::value;
    }
    default: {
      assert(format.type == BCF_BT_INT32);
      const int32_t raw = le_to_i32(sample + value_idx * 4);
      if (raw == bcf_int32_vector_end) return Slot::vector_end;
      if (raw == bcf_int32_missing) return Slot::missing;
      *value = raw;
      return Slot::value;
    }
  }
}

std::string format_value(double value) {
  char buffer[32];
  std::snprintf(buffer, sizeof buffer, "%g", value);
  return buffer;
}

// The full diploid calls of alleles 0 and 1 ("0/1", "1|1"...) and the fully
// missing ones ("./.") of every sample, as store_hard_call would give them
// (dosages only when GT is their source, else null). Every sample is stored,
// so that the loop vectorises; chunk_plain[c] says whether all samples of
// chunk c had such a call, and the caller decodes the others of a chunk that
// did not again.
TAMIS_VECTOR_CLONES
void decode_plain_diploid_pairs(const std::uint8_t* __restrict pairs, std::size_t samples,
                                std::uint8_t* __restrict ploidy, std::int8_t* __restrict calls,
                                double* __restrict dosages, std::uint8_t* __restrict chunk_plain) {
  static_assert(kSampleChunk == 16, "a chunk is 16 allele pairs, one 32-byte vector");
  typedef std::uint8_t PairBytes __attribute__((vector_size(32)));
  typedef std::uint8_t SampleBytes __attribute__((vector_size(16)));
  const std::size_t full_chunks = samples / kSampleChunk;
  for (std::size_t chunk = 0; chunk < full_chunks; ++chunk) {
    const std::size_t first = chunk * kSampleChunk;
    PairBytes raw;
    std::memcpy(&raw, pairs + first * 2, sizeof raw);
    const SampleBytes first_alleles =
        __builtin_shufflevector(raw, raw, 0, 2, 4, 6, 8, 10, 12, 14, 16, 18, 20, 22, 24, 26, 28, 30);
    const SampleBytes second_alleles =
        __builtin_shufflevector(raw, raw, 1, 3, 5, 7, 9, 11, 13, 15, 17, 19, 21, 23, 25, 27, 29, 31);
    // Encoded alleles 0 and 1 are 2..5 (the unsigned difference wraps below
    // 2); a missing allele is 0 or 1. Masks are all ones where true.
    const SampleBytes called = (SampleBytes)(((first_alleles - 2) < 4) & ((second_alleles - 2) < 4));
    const SampleBytes missing = (SampleBytes)((first_alleles < 2) & (second_alleles < 2));
    const SampleBytes copies = (first_alleles >> 1) + (second_alleles >> 1) - 2;
    // A missing call: no call (-1, all bits set) and ploidy 0.
    const SampleBytes call = (copies & ~missing) | missing;
    const SampleBytes call_ploidy = (SampleBytes)(~missing) & 2;
    std::memcpy(calls + first, &call, sizeof call);
    std::memcpy(ploidy + first, &call_ploidy, sizeof call_ploidy);
    const SampleBytes fast = called | missing;
    std::uint64_t fast_words[2];
    std::memcpy(fast_words, &fast, sizeof fast_words);
    chunk_plain[chunk] = (fast_words[0] & fast_words[1]) == ~std::uint64_t{0};
  }
  if (full_chunks * kSampleChunk < samples) {  // the last, shorter chunk
    std::size_t fast_count = 0;
    for (std::size_t sample_idx = full_chunks * kSampleChunk; sample_idx < samples; ++sample_idx) {
      const std::uint8_t* pair = pairs + sample_idx * 2;
      fast_count += is_fast_diploid_pair(pair);
      const bool missing = is_missing_diploid_pair(pair);
      ploidy[sample_idx] = missing ? 0 : 2;
      calls[sample_idx] = missing ? -1 : static_cast<std::int8_t>(static_cast<int>((pair[0] >> 1) + (pair[1] >> 1)) - 2);
    }
    chunk_plain[full_chunks] = fast_count == samples - full_chunks * kSampleChunk;
  }
  if (dosages) {
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      dosages[sample_idx] = calls[sample_idx] < 0 ? missing_dosage : calls[sample_idx];
    }
  }
}

// The single DS value of every sample, stored whatever it is (missing as
// NaN); chunk_plain[c] says whether all of chunk c lie in range or are
// missing, and the caller decodes the others of a chunk that did not again.
TAMIS_VECTOR_CLONES
void decode_plain_dosages(const std::uint8_t* __restrict values, std::size_t samples, double* __restrict dosages,
                          std::uint8_t* __restrict chunk_plain) {
  for (std::size_t chunk = 0; chunk * kSampleChunk < samples; ++chunk) {
    const std::size_t first = chunk * kSampleChunk, last = std::min(samples, first + kSampleChunk);
    std::size_t fast_count = 0;
    for (std::size_t sample_idx = first; sample_idx < last; ++sample_idx) {
      const float value = read_host_float(values + sample_idx * sizeof(float));
      const bool missing = is_missing_dosage(values + sample_idx * sizeof(float));
      fast_count += is_plain_dosage(value) | missing;
      dosages[sample_idx] = missing ? missing_dosage : value;
    }
    chunk_plain[chunk] = fast_count == last - first;
  }
}

class RecordDecoder {
 public:
  RecordDecoder(const RecordOrigin& origin, bcf1_t* record, std::size_t sample_count,
                const FormatTagIds& tags)
      : origin_(origin), record_(record), sample_count_(sample_count), tags_(tags) {}

  void decode_into(DosageBlock& out);

 private:
  [[noreturn]] void fail(const std::string& what, const std::string& fix) const;
  [[noreturn]] void fail_for_sample(std::size_t sample_idx, const std::string& what,
                                    const std::string& fix) const;
  const bcf_fmt_t* find_format(int tag_id) const;
  void append_sites(DosageBlock& out, bool has_hard_calls) const;
  void decode_genotypes(const bcf_fmt_t& format, bool gives_dosages);
  void decode_one_genotype(const bcf_fmt_t& format, std::size_t sample_idx, bool gives_dosages);
  void decode_values(const bcf_fmt_t& format);
  void check_float_storage(const bcf_fmt_t& format) const;
  int gather_values(const bcf_fmt_t& format, std::size_t sample_idx);
  void report_rejected(std::size_t sample_idx, const SampleOutcome& outcome, int given) const;

  const char* field_name() const { return dosage_field_name(origin_.file->field); }
  const std::string& sample_name(std::size_t sample_idx) const {
    return (*origin_.file->sample_ids)[sample_idx];
  }

  const RecordOrigin& origin_;
  bcf1_t* record_;
  std::size_t sample_count_;
  FormatTagIds tags_;
  int allele_count_ = 0;  // REF and ALT alleles
  SiteColumns columns_;
  std::vector<int> call_alleles_;  // one sample's called alleles, reused
  std::vector<double> values_;     // one sample's DS or GP values, NaN when missing
  std::vector<std::uint8_t> chunk_plain_;  // per chunk of samples: all decoded by the fast pass
};

void RecordDecoder::fail(const std::string& what, const std::string& fix) const {
  const std::string where = origin_.file->path + ", record " +
                            std::to_string(origin_.record_number) + " (" + origin_.chromosome +
                            ":" + std::to_string(record_->pos + 1) + ")";
  throw Error(ExitCode::genotype_input, where, what, fix);
}

void RecordDecoder::fail_for_sample(std::size_t sample_idx, const std::string& what,
                                    const std::string& fix) const {
  fail("sample '" + sample_name(sample_idx) + "': " + what, fix);
}

void RecordDecoder::decode_into(DosageBlock& out) {
  if (bcf_unpack(record_, BCF_UN_STR | BCF_UN_FMT) != 0) {
    fail("htslib could not unpack the record", "check the file with `bcftools view`");
  }
  allele_count_ = record_->n_allele;
  if (allele_count_ < 2) return;  // no ALT allele, nothing to test

  const bcf_fmt_t* genotypes = find_format(tags_.genotype);
  const std::size_t first_site = out.sites.size();
  append_sites(out, genotypes != nullptr);
  columns_ = reserve_site_columns(out, first_site);
  if (sample_count_ == 0) return;

  const bool dosages_from_gt = origin_.file->field == DosageField::gt;
  const bcf_fmt_t* format = dosages_from_gt ? genotypes : find_format(tags_.dosage);
  if (!format) {
    fail(std::string("the record has no FORMAT/") + field_name() +
             " although this file's dosages come from it",
         std::string("give every record a ") + field_name() +
             " value (\".\" when missing), or read the dosages from another FORMAT field");
  }
  // An all-missing field (n == 0) leaves the defaults: NaN, ploidy 0, no call.
  if (genotypes && genotypes->n > 0 && genotypes->type != BCF_BT_NULL) {
    decode_genotypes(*genotypes, dosages_from_gt);
  }
  if (dosages_from_gt || format->n == 0 || format->type == BCF_BT_NULL) return;
  decode_values(*format);
}

const bcf_fmt_t* RecordDecoder::find_format(int tag_id) const {
  if (tag_id < 0) return nullptr;
  for (int format_idx = 0; format_idx < record_->n_fmt; ++format_idx) {
    if (record_->d.fmt[format_idx].id == tag_id) return &record_->d.fmt[format_idx];
  }
  return nullptr;
}

void RecordDecoder::append_sites(DosageBlock& out, bool has_hard_calls) const {
  for (int allele = 1; allele < allele_count_; ++allele) {
    VariantSite site;
    site.chromosome = origin_.chromosome;
    site.position = record_->pos + 1;
    site.id = record_->d.id ? record_->d.id : ".";
    site.ref = record_->d.allele[0];
    site.alt = record_->d.allele[allele];
    site.allele_index = allele;
    site.alt_count = allele_count_ - 1;
    site.file_index = origin_.file->file_index;
    site.record_number = origin_.record_number;
    site.source = origin_.file->field;
    site.has_hard_calls = has_hard_calls;
    out.sites.push_back(std::move(site));
  }
}

// GT: the hard calls, and when they are the dosage source, the dosages. The
// call's ploidy is its length before htslib's end-of-vector padding, so
// haploid and diploid calls can share a record.
void RecordDecoder::decode_genotypes(const bcf_fmt_t& format, bool gives_dosages) {
  if (format.type != BCF_BT_INT8 && format.type != BCF_BT_INT16 && format.type != BCF_BT_INT32) {
    fail("FORMAT/GT is not stored as genotype integers", "rewrite the file with `bcftools view`");
  }
  call_alleles_.resize(static_cast<std::size_t>(format.n));
  // Most records store biallelic diploid calls in one byte per allele: a
  // chunk of such samples is decoded in one branch-free pass, and only the
  // samples of a chunk that it cannot take are read slot by slot.
  const bool plain_pairs = format.type == BCF_BT_INT8 && format.n == 2 && allele_count_ == 2;
  chunk_plain_.assign((sample_count_ + kSampleChunk - 1) / kSampleChunk, 0);
  if (plain_pairs) {
    decode_plain_diploid_pairs(format.p, sample_count_, columns_.ploidy, columns_.diploid_calls,
                               gives_dosages ? columns_.dosages : nullptr, chunk_plain_.data());
  }
  for (std::size_t chunk = 0; chunk < chunk_plain_.size(); ++chunk) {
    if (chunk_plain_[chunk]) continue;
    const std::size_t chunk_end = std::min(sample_count_, (chunk + 1) * kSampleChunk);
    for (std::size_t sample_idx = chunk * kSampleChunk; sample_idx < chunk_end; ++sample_idx) {
      if (plain_pairs && is_fast_diploid_pair(format.p + sample_idx * 2)) continue;  // done above
      decode_one_genotype(format, sample_idx, gives_dosages);
    }
  }
}

void RecordDecoder::decode_one_genotype(const bcf_fmt_t& format, std::size_t sample_idx, bool gives_dosages) {
  if (format.type == BCF_BT_INT8 && format.n == 2) {
    const std::int8_t first = static_cast<std::int8_t>(format.p[sample_idx * 2]);
    const std::int8_t second = static_cast<std::int8_t>(format.p[sample_idx * 2 + 1]);
    // An encoded allele is (index + 1) << 1 | phased, so 2 and up is called.
    const int first_allele = (first >> 1) - 1, second_allele = (second >> 1) - 1;
    const bool called = first >= 2 && second >= 2;
    if (called && first_allele < allele_count_ && second_allele < allele_count_) {
      call_alleles_[0] = first_allele;
      call_alleles_[1] = second_allele;
      store_hard_call(columns_, sample_idx, allele_count_, call_alleles_.data(), 2, 2, false, gives_dosages,
                      origin_.file->haploid_dosage);
      return;
    }
  }
  int length = 0;
  int called = 0;
  bool any_missing = false;
  for (int value_idx = 0; value_idx < format.n; ++value_idx) {
    int32_t encoded = 0;
    Slot slot = read_int_slot(format, sample_idx, value_idx, &encoded);
    if (slot == Slot::vector_end) break;
    ++length;
    if (slot == Slot::missing || bcf_gt_is_missing(encoded)) {
      any_missing = true;
      continue;
    }
    const int allele = bcf_gt_allele(encoded);
    if (allele < 0 || allele >= allele_count_) {
      fail_for_sample(sample_idx,
                      "GT names allele " + std::to_string(allele) + " but the record has only " +
                          std::to_string(allele_count_ - 1) + " ALT allele(s)",
                      "correct the GT value or the ALT column");
    }
    call_alleles_[called++] = allele;
  }
  store_hard_call(columns_, sample_idx, allele_count_, call_alleles_.data(), called, length, any_missing,
                  gives_dosages, origin_.file->haploid_dosage);
}

void RecordDecoder::check_float_storage(const bcf_fmt_t& format) const {
  if (format.type == BCF_BT_FLOAT) return;
  fail(std::string("FORMAT/") + field_name() + " is not stored as floating-point values",
       std::string("declare ") + field_name() + " as Type=Float and rewrite the file");
}

// The sample's values up to htslib's end-of-vector padding, NaN where missing.
int RecordDecoder::gather_values(const bcf_fmt_t& format, std::size_t sample_idx) {
  int given = 0;
  for (; given < format.n; ++given) {
    double value = 0.0;
    const Slot slot = read_float_slot(format, sample_idx, given, &value);
    if (slot == Slot::vector_end) break;
    values_[given] = slot == Slot::value ? value : missing_dosage;
  }
  return given;
}

// DS (Number=A, one expected count per ALT allele) or GP (a probability per
// genotype); the arithmetic lives in dosage_rules.hpp.
void RecordDecoder::decode_values(const bcf_fmt_t& format) {
  check_float_storage(format);
  values_.resize(static_cast<std::size_t>(format.n));
  const bool probabilities = origin_.file->field == DosageField::gp;
  // One DS value per sample on a biallelic record: the plain in-range values
  // are stored in one pass; the rest (missing, padding, rejected) goes below.
  const bool single_dosages = !probabilities && format.n == 1 && allele_count_ == 2;
  chunk_plain_.assign((sample_count_ + kSampleChunk - 1) / kSampleChunk, 0);
  if (single_dosages) decode_plain_dosages(format.p, sample_count_, columns_.dosages, chunk_plain_.data());
  for (std::size_t chunk = 0; chunk < chunk_plain_.size(); ++chunk) {
    if (chunk_plain_[chunk]) continue;
    const std::size_t chunk_end = std::min(sample_count_, (chunk + 1) * kSampleChunk);
    for (std::size_t sample_idx = chunk * kSampleChunk; sample_idx < chunk_end; ++sample_idx) {
      const std::uint8_t* value = format.p + sample_idx * sizeof(float);
      if (single_dosages && (is_plain_dosage(read_host_float(value)) || is_missing_dosage(value))) continue;
      const int given = gather_values(format, sample_idx);
      const SampleOutcome outcome =
          probabilities ? convert_probabilities(columns_, sample_idx, values_.data(), given, allele_count_)
                        : convert_dosages(columns_, sample_idx, values_.data(), given, allele_count_);
      if (outcome.kind != SampleOutcome::ok) report_rejected(sample_idx, outcome, given);
    }
  }
}

void RecordDecoder::report_rejected(std::size_t sample_idx, const SampleOutcome& outcome,
                                    int given) const {
  const int alt_count = allele_count_ - 1;
  const bool probabilities = origin_.file->field == DosageField::gp;
  switch (outcome.kind) {
    case SampleOutcome::wrong_count:
      if (probabilities) {
        fail_for_sample(sample_idx,
                        "GP has " + std::to_string(given) + " value(s), expected " +
                            std::to_string(diploid_genotype_count(allele_count_)) + " (diploid) or " +
                            std::to_string(allele_count_) + " (haploid)",
                        "write one probability per possible genotype, in VCF order");
      }
      fail_for_sample(sample_idx,
                      "DS has " + std::to_string(given) + " value(s), expected " +
                          std::to_string(alt_count) + " (one per ALT allele, Number=A)",
                      "write one DS value per ALT allele, or split multi-allelic records with "
                      "`bcftools norm -m-`");
    case SampleOutcome::not_probability:
      fail_for_sample(sample_idx,
                      "GP value " + format_value(outcome.value) + " is not a probability between 0 and 1",
                      "GP must hold probabilities (VCF 4.3); convert phred-scaled values first");
    case SampleOutcome::out_of_range: {
      // A haploid GP call (one probability per allele) allows up to 1.
      const bool haploid = probabilities && given == allele_count_;
      const double limit = haploid ? 1.0 : 2.0;
      fail_for_sample(sample_idx,
                      std::string(field_name()) + " gives a dosage of " + format_value(outcome.value) +
                          " for ALT allele " + std::to_string(outcome.allele) +
                          ", expected a value from 0 to " + format_value(limit),
                      std::string("check how ") + field_name() +
                          " was produced; dosages count ALT alleles (0 to 2 for a diploid call)");
    }
    case SampleOutcome::ok: break;
  }
}

}  // namespace

SiteColumns reserve_site_columns(DosageBlock& out, std::size_t first_site) {
  const std::size_t value_count = out.sites.size() * out.sample_count;
  out.dosages.resize(value_count, missing_dosage);
  out.ploidy.resize(value_count, 0);
  out.diploid_calls.resize(value_count, -1);
  const std::size_t offset = first_site * out.sample_count;
  return SiteColumns{out.dosages.data() + offset, out.ploidy.data() + offset,
                     out.diploid_calls.data() + offset, out.sample_count};
}

void decode_htslib_record(const RecordOrigin& origin, bcf1_t* record, std::size_t sample_count,
                          const FormatTagIds& tags, DosageBlock& out) {
  assert(out.sample_count == sample_count && "the block is set up for this sample set");
  RecordDecoder decoder(origin, record, sample_count, tags);
  decoder.decode_into(out);
}

}  // namespace genotype_detail

RecordBatch::RecordBatch() : impl_(std::make_unique<Impl>()) {}
RecordBatch::~RecordBatch() = default;
RecordBatch::RecordBatch(RecordBatch&&) noexcept = default;
RecordBatch& RecordBatch::operator=(RecordBatch&&) noexcept = default;

std::size_t RecordBatch::size() const { return impl_ ? impl_->count : 0; }

void RecordBatch::decode(DosageBlock& out) const {
  if (!impl_) return;
  assert((out.sites.empty() || out.sample_count == impl_->sample_count) &&
         "a block holds sites of one sample set");
  out.sample_count = impl_->sample_count;
  for (std::size_t record_idx = 0; record_idx < impl_->count; ++record_idx) {
    const genotype_detail::RecordOrigin& origin = impl_->origins[record_idx];
    if (origin.file->text_decoder) {
      const kstring_t& line = impl_->lines[record_idx];
      genotype_detail::decode_vcf_text_record(origin, std::string_view(line.s, line.l), out);
    } else {
      const genotype_detail::FormatTagIds tags{origin.file->tag_id, origin.file->gt_tag_id};
      genotype_detail::decode_htslib_record(origin, impl_->records[record_idx], impl_->sample_count,
                                            tags, out);
    }
  }
}

}  // namespace tamis
