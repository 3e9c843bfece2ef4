// The BCF 2.2 record layout (hts-specs VCFv4.3, section 6.3): two lengths,
// six fixed fields, then the shared section (ID, alleles, FILTER, INFO) and
// the per-sample section (FORMAT), both made of typed values.

// Values sit at any byte offset: read them byte by byte (htslib's
// documented switch), not through misaligned word loads.
#ifndef HTS_ALLOW_UNALIGNED
#define HTS_ALLOW_UNALIGNED 0
#endif
#include <htslib/hts_endian.h>

#include "genotypes/bcf_records.hpp"

#include <cstdint>
#include <cstring>
#include <limits>

namespace tamis::genotype_detail {

namespace {

constexpr std::size_t kFixedBytes = 32;       // the lengths and the six fixed fields
constexpr std::uint32_t kFixedInShared = 24;  // of which l_shared counts the six
// No real record comes near this; a damaged length would have us allocate
// up to 8 GiB before finding out.
constexpr std::uint64_t kLargestRecord = std::uint64_t{1} << 30;

// Typed-value type codes (section 6.3.3).
enum ValueType : int { null_type = 0, int8_type = 1, int16_type = 2, int32_type = 3, float_type = 5, char_type = 7 };

std::size_t width_of(int type) {
  switch (type) {
    case int8_type: case char_type: return 1;
    case int16_type: return 2;
    case int32_type: case float_type: return 4;
    default: return 0;
  }
}

bool is_integer_type(int type) { return type == int8_type || type == int16_type || type == int32_type; }
bool is_value_type(int type) { return type == null_type || type == float_type || type == char_type || is_integer_type(type); }

// Walks typed values, refusing anything that would run past the section.
class TypedValues {
 public:
  TypedValues(const char* begin, std::size_t length)
      : at_(reinterpret_cast<const std::uint8_t*>(begin)), end_(at_ + length) {}

  // A single typed integer (a count or a dictionary key).
  bool integer(std::int32_t& value) {
    if (at_ >= end_) return false;
    const int type = *at_++ & 0xF;
    return is_integer_type(type) && element(type, value);
  }

  // One integer of a vector of `type`.
  bool element(int type, std::int32_t& value) {
    if (static_cast<std::size_t>(end_ - at_) < width_of(type)) return false;
    const std::uint8_t* bytes = at_;
    at_ += width_of(type);
    if (type == int8_type) value = static_cast<std::int8_t>(bytes[0]);
    else if (type == int16_type) value = le_to_i16(bytes);
    else value = le_to_i32(bytes);
    return true;
  }

  // A type byte (and the count that follows when the byte's is 15).
  bool descriptor(int& type, std::uint64_t& count) {
    if (at_ >= end_) return false;
    type = *at_ & 0xF;
    count = *at_ >> 4;
    ++at_;
    if (!is_value_type(type) || (type == null_type && count > 0 && count != 15)) return false;
    if (count != 15) return true;
    std::int32_t long_count = 0;
    if (!integer(long_count) || long_count < 0 || (type == null_type && long_count > 0)) return false;
    count = static_cast<std::uint64_t>(long_count);
    return true;
  }

  // Skips `count` values of `type`, `copies` times over (once per sample).
  bool skip(int type, std::uint64_t count, std::uint64_t copies = 1) {
    const std::uint64_t bytes = count * width_of(type) * copies;
    if (bytes > static_cast<std::uint64_t>(end_ - at_)) return false;
    at_ += bytes;
    return true;
  }

  // A typed vector whose type must pass `wanted`, skipped whole.
  template <typename Wanted>
  bool vector(Wanted wanted, std::uint64_t copies = 1) {
    int type = 0;
    std::uint64_t count = 0;
    return descriptor(type, count) && (count == 0 || wanted(type)) && skip(type, count, copies);
  }

 private:
  const std::uint8_t* at_;
  const std::uint8_t* end_;
};

bool is_declared_key(const bcf_hdr_t* header, std::int32_t key) {
  return key >= 0 && key < header->n[BCF_DT_ID] && header->id[BCF_DT_ID][key].key != nullptr;
}

bool is_declared_contig(const bcf_hdr_t* header, std::int32_t rid) {
  return rid >= 0 && rid < header->n[BCF_DT_CTG] && header->id[BCF_DT_CTG][rid].key != nullptr;
}

bool has_valid_shared_section(const bcf_hdr_t* header, const bcf1_t* record) {
  TypedValues values(record->shared.s, record->shared.l);
  const auto is_char = [](int type) { return type == char_type; };
  if (!values.vector(is_char)) return false;  // ID
  for (int allele = 0; allele < record->n_allele; ++allele) {
    if (!values.vector(is_char)) return false;
  }
  int type = 0;
  std::uint64_t count = 0;
  if (!values.descriptor(type, count) || (count > 0 && !is_integer_type(type))) return false;  // FILTER
  for (std::uint64_t filter = 0; filter < count; ++filter) {
    std::int32_t key = 0;
    if (!values.element(type, key) || !is_declared_key(header, key)) return false;
  }
  for (int info = 0; info < record->n_info; ++info) {
    std::int32_t key = 0;
    if (!values.integer(key) || !is_declared_key(header, key) || !values.vector(is_value_type)) return false;
  }
  return true;
}

bool has_valid_sample_section(const bcf_hdr_t* header, const bcf1_t* record) {
  TypedValues values(record->indiv.s, record->indiv.l);
  for (int format = 0; format < record->n_fmt; ++format) {
    std::int32_t key = 0;
    if (!values.integer(key) || !is_declared_key(header, key) ||
        !values.vector(is_value_type, record->n_sample)) {
      return false;
    }
  }
  return true;
}

bool has_valid_structure(const bcf_hdr_t* header, const bcf1_t* record) {
  if (!is_declared_contig(header, record->rid) || record->n_allele < 1) return false;
  if (record->n_fmt > 0 && record->n_sample != static_cast<std::uint32_t>(bcf_hdr_nsamples(header))) return false;
  return has_valid_shared_section(header, record) && has_valid_sample_section(header, record);
}

void set_fixed_fields(const std::uint8_t* fixed, bcf1_t* record) {
  record->rid = static_cast<std::int32_t>(le_to_u32(fixed + 8));
  const std::uint32_t position = le_to_u32(fixed + 12);
  // POS 0 (a telomere) is stored as -1 after the shift to 0-based.
  record->pos = position == std::numeric_limits<std::uint32_t>::max() ? -1 : position;
  record->rlen = static_cast<std::int32_t>(le_to_u32(fixed + 16));
  std::memcpy(&record->qual, fixed + 20, sizeof record->qual);
  const std::uint32_t info_and_alleles = le_to_u32(fixed + 24), samples_and_formats = le_to_u32(fixed + 28);
  record->n_info = info_and_alleles & 0xFFFF;
  record->n_allele = info_and_alleles >> 16;
  record->n_sample = samples_and_formats & 0xFFFFFF;
  record->n_fmt = samples_and_formats >> 24;
}

bool read_section(PrefetchedBgzf& stream, kstring_t& section, std::uint32_t length) {
  if (ks_resize(&section, length > 0 ? length : 1) != 0) return false;
  section.l = length;
  return stream.read(section.s, length) == static_cast<std::int64_t>(length);
}

}  // namespace

int read_bcf_record(PrefetchedBgzf& stream, const bcf_hdr_t* header, bcf1_t* record) {
  std::uint8_t fixed[kFixedBytes];
  const std::int64_t got = stream.read(fixed, sizeof fixed);
  if (got == 0) return -1;
  if (got != static_cast<std::int64_t>(sizeof fixed)) return -2;
  bcf_clear(record);
  const std::uint32_t shared_length = le_to_u32(fixed), sample_length = le_to_u32(fixed + 4);
  if (shared_length < kFixedInShared ||
      std::uint64_t{shared_length} + sample_length > kLargestRecord) {
    return -2;
  }
  set_fixed_fields(fixed, record);
  if (!read_section(stream, record->shared, shared_length - kFixedInShared) ||
      !read_section(stream, record->indiv, sample_length)) {
    return -2;
  }
  // Old writers left FORMAT keys without samples; they carry nothing to read.
  if (record->indiv.l == 0 || record->n_sample == 0) record->n_fmt = 0;
  return has_valid_structure(header, record) ? 0 : -2;
}

}  // namespace tamis::genotype_detail
