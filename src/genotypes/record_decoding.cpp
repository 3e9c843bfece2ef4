// Turning htslib records into one dosage vector per ALT allele. Runs on
// worker threads: it reads only the batch's own records and the immutable
// FileInfo, never an htslib header.
#include <htslib/hts_endian.h>
#include <htslib/vcf.h>

#include <algorithm>
#include <cassert>
#include <cmath>
#include <cstdio>
#include <limits>

#include "genotypes/record_batch_impl.hpp"
#include "tamis/errors.hpp"

namespace tamis {

namespace {

using genotype_detail::RecordOrigin;

constexpr double missing_dosage = std::numeric_limits<double>::quiet_NaN();
// Room for the rounding of values written with few decimals.
constexpr double dosage_tolerance = 1e-4;
constexpr double diploid_dosage_limit = 2.0 + dosage_tolerance;

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

class RecordDecoder {
 public:
  RecordDecoder(const RecordOrigin& origin, bcf1_t* record, std::size_t sample_count)
      : origin_(origin), record_(record), sample_count_(sample_count) {}

  void decode_into(DosageBlock& out);

 private:
  [[noreturn]] void fail(const std::string& what, const std::string& fix) const;
  [[noreturn]] void fail_for_sample(std::size_t sample_idx, const std::string& what,
                                    const std::string& fix) const;
  const bcf_fmt_t* find_format(int tag_id) const;
  void append_sites(DosageBlock& out, bool has_hard_calls) const;
  void decode_genotypes(const bcf_fmt_t& format, bool gives_dosages);
  void decode_dosages(const bcf_fmt_t& format);
  void decode_probabilities(const bcf_fmt_t& format);
  void check_float_storage(const bcf_fmt_t& format) const;
  int count_given_values(const bcf_fmt_t& format, std::size_t sample_idx) const;
  void set_sample_missing(std::size_t sample_idx);
  void check_dosage(std::size_t sample_idx, int allele, double dosage, double limit) const;

  double& dosage_of(int allele, std::size_t sample_idx) {
    return dosages_[(allele - 1) * sample_count_ + sample_idx];
  }
  std::uint8_t& ploidy_of(int allele, std::size_t sample_idx) {
    return ploidy_[(allele - 1) * sample_count_ + sample_idx];
  }
  std::int8_t& diploid_call_of(int allele, std::size_t sample_idx) {
    return diploid_calls_[(allele - 1) * sample_count_ + sample_idx];
  }
  const char* field_name() const { return dosage_field_name(origin_.file->field); }
  const std::string& sample_name(std::size_t sample_idx) const {
    return (*origin_.file->sample_ids)[sample_idx];
  }

  const RecordOrigin& origin_;
  bcf1_t* record_;
  std::size_t sample_count_;
  int allele_count_ = 0;  // REF and ALT alleles
  double* dosages_ = nullptr;
  std::uint8_t* ploidy_ = nullptr;
  std::int8_t* diploid_calls_ = nullptr;
  std::vector<int> call_alleles_;  // one sample's called alleles, reused
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

  const bcf_fmt_t* genotypes = find_format(origin_.file->gt_tag_id);
  const std::size_t first_site = out.sites.size();
  append_sites(out, genotypes != nullptr);
  const std::size_t value_count = out.sites.size() * sample_count_;
  out.dosages.resize(value_count, missing_dosage);
  out.ploidy.resize(value_count, 0);
  out.diploid_calls.resize(value_count, -1);
  dosages_ = out.dosages.data() + first_site * sample_count_;
  ploidy_ = out.ploidy.data() + first_site * sample_count_;
  diploid_calls_ = out.diploid_calls.data() + first_site * sample_count_;
  if (sample_count_ == 0) return;

  const bool dosages_from_gt = origin_.file->field == DosageField::gt;
  const bcf_fmt_t* format = dosages_from_gt ? genotypes : find_format(origin_.file->tag_id);
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
  switch (origin_.file->field) {
    case DosageField::ds: decode_dosages(*format); break;
    case DosageField::gp: decode_probabilities(*format); break;
    case DosageField::gt:
    case DosageField::automatic: assert(false && "GT is decoded above; auto is resolved per file"); break;
  }
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

void RecordDecoder::set_sample_missing(std::size_t sample_idx) {
  for (int allele = 1; allele < allele_count_; ++allele) dosage_of(allele, sample_idx) = missing_dosage;
}

// GT: the hard calls, and when they are the dosage source, the number of
// copies of each ALT allele (times haploid_dosage for a haploid call). The
// call's ploidy is its length before htslib's end-of-vector padding, so
// haploid and diploid calls can share a record.
void RecordDecoder::decode_genotypes(const bcf_fmt_t& format, bool gives_dosages) {
  if (format.type != BCF_BT_INT8 && format.type != BCF_BT_INT16 && format.type != BCF_BT_INT32) {
    fail("FORMAT/GT is not stored as genotype integers", "rewrite the file with `bcftools view`");
  }
  call_alleles_.resize(static_cast<std::size_t>(format.n));
  for (std::size_t sample_idx = 0; sample_idx < sample_count_; ++sample_idx) {
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
    const bool full_diploid = length == 2 && !any_missing;
    // A partly missing call ("0/.") says nothing reliable about the dosage.
    const bool dosage_known = length > 0 && !any_missing;
    const int copy_weight = length == 1 ? origin_.file->haploid_dosage : 1;
    for (int allele = 1; allele < allele_count_; ++allele) {
      int copies = 0;
      for (int called_idx = 0; called_idx < called; ++called_idx) {
        copies += call_alleles_[called_idx] == allele;
      }
      ploidy_of(allele, sample_idx) = static_cast<std::uint8_t>(std::min(called, 255));
      diploid_call_of(allele, sample_idx) = full_diploid ? static_cast<std::int8_t>(copies) : -1;
      if (gives_dosages) {
        dosage_of(allele, sample_idx) =
            dosage_known ? static_cast<double>(copies * copy_weight) : missing_dosage;
      }
    }
  }
}

void RecordDecoder::check_float_storage(const bcf_fmt_t& format) const {
  if (format.type == BCF_BT_FLOAT) return;
  fail(std::string("FORMAT/") + field_name() + " is not stored as floating-point values",
       std::string("declare ") + field_name() + " as Type=Float and rewrite the file");
}

int RecordDecoder::count_given_values(const bcf_fmt_t& format, std::size_t sample_idx) const {
  double unused = 0.0;
  for (int value_idx = 0; value_idx < format.n; ++value_idx) {
    if (read_float_slot(format, sample_idx, value_idx, &unused) == Slot::vector_end) return value_idx;
  }
  return format.n;
}

void RecordDecoder::check_dosage(std::size_t sample_idx, int allele, double dosage,
                                 double limit) const {
  if (dosage >= 0.0 && dosage <= limit) return;
  fail_for_sample(sample_idx,
                  std::string(field_name()) + " gives a dosage of " + format_value(dosage) +
                      " for ALT allele " + std::to_string(allele) + ", expected a value from 0 to " +
                      format_value(limit - dosage_tolerance),
                  std::string("check how ") + field_name() +
                      " was produced; dosages count ALT alleles (0 to 2 for a diploid call)");
}

// DS: one expected ALT count per ALT allele (Number=A, VCF 4.3 section 1.6.2).
void RecordDecoder::decode_dosages(const bcf_fmt_t& format) {
  check_float_storage(format);
  const int alt_count = allele_count_ - 1;
  for (std::size_t sample_idx = 0; sample_idx < sample_count_; ++sample_idx) {
    const int given = count_given_values(format, sample_idx);
    double first = 0.0;
    const bool only_missing =
        given == 0 || (given == 1 && read_float_slot(format, sample_idx, 0, &first) == Slot::missing);
    if (only_missing) {
      set_sample_missing(sample_idx);
      continue;
    }
    if (given != alt_count) {
      fail_for_sample(sample_idx,
                      "DS has " + std::to_string(given) + " value(s), expected " +
                          std::to_string(alt_count) + " (one per ALT allele, Number=A)",
                      "write one DS value per ALT allele, or split multi-allelic records with "
                      "`bcftools norm -m-`");
    }
    for (int allele = 1; allele < allele_count_; ++allele) {
      double value = 0.0;
      if (read_float_slot(format, sample_idx, allele - 1, &value) != Slot::value) {
        dosage_of(allele, sample_idx) = missing_dosage;
        continue;
      }
      check_dosage(sample_idx, allele, value, diploid_dosage_limit);
      dosage_of(allele, sample_idx) = value;
    }
  }
}

// GP: the expected count of each ALT allele, sum over genotypes of
// (copies of the allele) x (probability). Diploid genotypes come in the VCF
// order, (j,k) with j <= k at index k(k+1)/2 + j (VCF 4.3 section 1.6.2).
void RecordDecoder::decode_probabilities(const bcf_fmt_t& format) {
  check_float_storage(format);
  const int diploid_count = allele_count_ * (allele_count_ + 1) / 2;
  const int haploid_count = allele_count_;
  for (std::size_t sample_idx = 0; sample_idx < sample_count_; ++sample_idx) {
    const int given = count_given_values(format, sample_idx);
    if (given != diploid_count && given != haploid_count) {
      double first = 0.0;
      const bool only_missing =
          given == 0 ||
          (given == 1 && read_float_slot(format, sample_idx, 0, &first) == Slot::missing);
      if (only_missing) {
        set_sample_missing(sample_idx);
        continue;
      }
      fail_for_sample(sample_idx,
                      "GP has " + std::to_string(given) + " value(s), expected " +
                          std::to_string(diploid_count) + " (diploid) or " +
                          std::to_string(haploid_count) + " (haploid)",
                      "write one probability per possible genotype, in VCF order");
    }
    bool any_missing = false;
    for (int value_idx = 0; value_idx < given && !any_missing; ++value_idx) {
      double probability = 0.0;
      if (read_float_slot(format, sample_idx, value_idx, &probability) != Slot::value) {
        any_missing = true;
      } else if (probability < 0.0 || probability > 1.0 + dosage_tolerance) {
        fail_for_sample(sample_idx,
                        "GP value " + format_value(probability) +
                            " is not a probability between 0 and 1",
                        "GP must hold probabilities (VCF 4.3); convert phred-scaled values first");
      }
    }
    if (any_missing) {
      set_sample_missing(sample_idx);
      continue;
    }
    const int ploidy = given == diploid_count ? 2 : 1;
    for (int allele = 1; allele < allele_count_; ++allele) dosage_of(allele, sample_idx) = 0.0;
    if (ploidy == 1) {
      for (int allele = 1; allele < allele_count_; ++allele) {
        read_float_slot(format, sample_idx, allele, &dosage_of(allele, sample_idx));
      }
    } else {
      for (int second = 0; second < allele_count_; ++second) {
        for (int first = 0; first <= second; ++first) {
          double probability = 0.0;
          read_float_slot(format, sample_idx, second * (second + 1) / 2 + first, &probability);
          if (first > 0) dosage_of(first, sample_idx) += probability;
          if (second > 0) dosage_of(second, sample_idx) += probability;
        }
      }
    }
    for (int allele = 1; allele < allele_count_; ++allele) {
      check_dosage(sample_idx, allele, dosage_of(allele, sample_idx), ploidy + dosage_tolerance);
    }
  }
}

}  // namespace

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
    RecordDecoder decoder(impl_->origins[record_idx], impl_->records[record_idx],
                          impl_->sample_count);
    decoder.decode_into(out);
  }
}

}  // namespace tamis
