// The specialised VCF line decoder and its fallback to htslib's parser; see
// fast_vcf.hpp for what each path promises.
#include "genotypes/fast_vcf.hpp"

#include <htslib/kstring.h>
#include <htslib/vcf.h>

#include <atomic>
#include <cstdlib>
#include <cstring>
#include <mutex>
#include <unordered_map>
#include <unordered_set>
#include <vector>

#include "genotypes/dosage_rules.hpp"
#include "genotypes/record_batch_impl.hpp"
#include "genotypes/record_decoder.hpp"
#include "tamis/errors.hpp"

namespace tamis::genotype_detail {

namespace {

constexpr int fixed_columns = 9;  // CHROM to FORMAT (VCF 4.3 section 1.6)
constexpr int largest_format_keys = 255;  // htslib's limit on FORMAT identifiers
constexpr int largest_fast_ploidy = 16;   // longer calls go to htslib's parser
constexpr int largest_allele_digits = 9;
constexpr int largest_position_digits = 18;
// A decimal of at most 15 digits is an integer below 2^53 over a power of
// ten up to 10^15, both exact in a double, so one IEEE division gives the
// correctly rounded double, which is what strtod gives.
constexpr int largest_exact_digits = 15;
constexpr double powers_of_ten[largest_exact_digits + 1] = {
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15};

bool is_digit(char letter) { return letter >= '0' && letter <= '9'; }

bool is_base(char letter) {
  switch (letter) {
    case 'A': case 'C': case 'G': case 'T': case 'N':
    case 'a': case 'c': case 'g': case 't': case 'n': return true;
    default: return false;
  }
}

// Contig names htslib certainly accepts when it adds an undeclared contig.
bool is_plain_name(std::string_view name) {
  if (name.empty()) return false;
  for (char letter : name) {
    const bool plain = is_digit(letter) || (letter >= 'A' && letter <= 'Z') ||
                       (letter >= 'a' && letter <= 'z') || letter == '_' || letter == '.';
    if (!plain) return false;
  }
  return true;
}

enum class FieldRole : std::uint8_t { genotype, dosage, integer, real, text };

struct FormatPlan {
  std::uint64_t layout = 0;  // the decoder's serial and ...
  std::string format;            // ... the FORMAT column the plan was made for
  std::vector<FieldRole> roles;
  bool has_genotype = false;
  bool usable = false;
};

// A read position in one line; peek() gives '\0' at the end (lines holding
// a NUL byte never reach the specialised decoder).
struct Cursor {
  const char* at;
  const char* end;
  char peek() const { return at < end ? *at : '\0'; }
  char peek_next() const { return at + 1 < end ? at[1] : '\0'; }
};

std::string_view first_column(std::string_view line) {
  return line.substr(0, std::min(line.find('\t'), line.size()));
}

// CHROM:POS as the line gives them, for messages.
std::string place_in_line(std::string_view line) {
  const std::size_t first_tab = line.find('\t');
  if (first_tab == std::string_view::npos) return "";
  const std::size_t second_tab = line.find('\t', first_tab + 1);
  const std::string_view position =
      line.substr(first_tab + 1, second_tab == std::string_view::npos ? std::string_view::npos
                                                                      : second_tab - first_tab - 1);
  return std::string(line.substr(0, first_tab)) + ":" + std::string(position);
}

struct HeaderDeleter {
  void operator()(bcf_hdr_t* header) const { bcf_hdr_destroy(header); }
};

}  // namespace

struct VcfTextDecoder::Impl {
  // Tells decoders apart even when one is freed and another takes its
  // address, so that per-thread FORMAT plans are never taken for another file's.
  std::uint64_t serial = 0;
  std::size_t sample_count = 0;
  DosageField field = DosageField::gt;
  int haploid_dosage = 1;
  std::string dosage_key;  // "DS", "GP" or "GT"
  std::unordered_map<std::string, int> format_types;  // declared FORMAT tags: BCF_HT_*
  std::unordered_set<std::string> info_keys, filter_keys, contig_names;
  // htslib's parser adds undeclared contigs and tags to the header it is
  // given, so every parse uses a private copy, lent from this pool.
  std::unique_ptr<bcf_hdr_t, HeaderDeleter> pristine;
  mutable std::mutex pool_mutex;
  mutable std::vector<bcf_hdr_t*> idle_headers;

  ~Impl() {
    for (bcf_hdr_t* header : idle_headers) bcf_hdr_destroy(header);
  }

  bcf_hdr_t* borrow_header() const {
    std::lock_guard<std::mutex> lock(pool_mutex);
    if (!idle_headers.empty()) {
      bcf_hdr_t* header = idle_headers.back();
      idle_headers.pop_back();
      return header;
    }
    bcf_hdr_t* header = bcf_hdr_dup(pristine.get());
    if (!header) throw std::bad_alloc();
    return header;
  }
  void return_header(bcf_hdr_t* header) const {
    std::lock_guard<std::mutex> lock(pool_mutex);
    idle_headers.push_back(header);
  }

  void plan_format(std::string_view format, FormatPlan& plan) const;
};

VcfTextDecoder::VcfTextDecoder(const bcf_hdr_t* header, DosageField field, int haploid_dosage)
    : impl_(std::make_unique<Impl>()) {
  static std::atomic<std::uint64_t> decoders_made{0};
  Impl& layout = *impl_;
  layout.serial = ++decoders_made;
  layout.sample_count = static_cast<std::size_t>(bcf_hdr_nsamples(header));
  layout.field = field;
  layout.haploid_dosage = haploid_dosage;
  layout.dosage_key = dosage_field_name(field);
  for (int tag_id = 0; tag_id < header->n[BCF_DT_ID]; ++tag_id) {
    const bcf_idpair_t& entry = header->id[BCF_DT_ID][tag_id];
    if (!entry.key || !entry.val) continue;
    if (bcf_hdr_idinfo_exists(header, BCF_HL_FMT, tag_id)) {
      layout.format_types.emplace(entry.key, bcf_hdr_id2type(header, BCF_HL_FMT, tag_id));
    }
    if (bcf_hdr_idinfo_exists(header, BCF_HL_INFO, tag_id)) layout.info_keys.insert(entry.key);
    if (bcf_hdr_idinfo_exists(header, BCF_HL_FLT, tag_id)) layout.filter_keys.insert(entry.key);
  }
  for (int contig_id = 0; contig_id < header->n[BCF_DT_CTG]; ++contig_id) {
    const char* name = header->id[BCF_DT_CTG][contig_id].key;
    if (name) layout.contig_names.insert(name);
  }
  layout.pristine.reset(bcf_hdr_dup(header));
  if (!layout.pristine) throw std::bad_alloc();
}

VcfTextDecoder::~VcfTextDecoder() = default;

void VcfTextDecoder::Impl::plan_format(std::string_view format, FormatPlan& plan) const {
  plan.layout = serial;
  plan.format.assign(format.data(), format.size());
  plan.roles.clear();
  plan.has_genotype = false;
  plan.usable = false;
  bool has_dosage = false;
  std::unordered_set<std::string_view> seen;
  std::size_t start = 0;
  while (start <= format.size()) {
    const std::size_t colon = std::min(format.find(':', start), format.size());
    const std::string_view key = format.substr(start, colon - start);
    start = colon + 1;
    // Undeclared or repeated tags make htslib change its header or drop
    // data, with warnings: its parser handles those lines.
    auto declared = format_types.find(std::string(key));
    if (key.empty() || declared == format_types.end() || !seen.insert(key).second) return;
    if (plan.roles.size() == largest_format_keys) return;
    const int type = declared->second;
    if (key == "GT") {
      if (type != BCF_HT_STR) return;
      plan.roles.push_back(FieldRole::genotype);
      plan.has_genotype = true;
    } else if (key == dosage_key) {
      if (type != BCF_HT_REAL) return;
      plan.roles.push_back(FieldRole::dosage);
      has_dosage = true;
    } else if (type == BCF_HT_INT) {
      plan.roles.push_back(FieldRole::integer);
    } else if (type == BCF_HT_REAL) {
      plan.roles.push_back(FieldRole::real);
    } else if (type == BCF_HT_STR) {
      plan.roles.push_back(FieldRole::text);
    } else {
      return;
    }
  }
  // Without the dosage field the record is an error, which htslib's path reports.
  plan.usable = field == DosageField::gt ? plan.has_genotype : has_dosage;
}

namespace {

// Per-thread buffers of the specialised decoder.
struct FastScratch {
  FormatPlan plan;
  std::vector<double> values = std::vector<double>(16);
  std::vector<std::string_view> alleles;
};

// One line through the specialised decoder. run() returns false to decline,
// leaving the block as it found it.
class FastLineDecoder {
 public:
  FastLineDecoder(const VcfTextDecoder::Impl& layout, const RecordOrigin& origin, DosageBlock& out,
                  FastScratch& scratch)
      : layout_(layout), origin_(origin), out_(out), scratch_(scratch) {}

  bool run(std::string_view line) {
    const std::size_t first_site = out_.sites.size();
    if (decode_line(line, first_site)) return true;
    out_.sites.resize(first_site);
    const std::size_t value_count = first_site * out_.sample_count;
    out_.dosages.resize(value_count);
    out_.ploidy.resize(value_count);
    out_.diploid_calls.resize(value_count);
    return false;
  }

 private:
  bool decode_line(std::string_view line, std::size_t first_site);
  bool split_fixed_columns(std::string_view line, std::string_view* columns, const char** samples) const;
  bool check_site_columns(const std::string_view* columns) const;
  bool split_alleles(std::string_view ref, std::string_view alt);
  void append_sites(const std::string_view* columns, std::int64_t position);
  bool decode_samples(Cursor cursor);
  bool decode_biallelic_gt_ds(Cursor cursor);
  bool finish_sample(Cursor& cursor, std::size_t sample_idx) const;
  bool decode_sample_field(FieldRole role, Cursor& cursor, std::size_t sample_idx);
  void fill_omitted_field(FieldRole role, std::size_t sample_idx);
  bool decode_genotype(Cursor& cursor, std::size_t sample_idx);
  bool decode_values(Cursor& cursor, std::size_t sample_idx);
  bool store_values(std::size_t sample_idx, int given);

  const VcfTextDecoder::Impl& layout_;
  const RecordOrigin& origin_;
  DosageBlock& out_;
  FastScratch& scratch_;
  int allele_count_ = 0;
  SiteColumns columns_;
};

bool parse_position(std::string_view text, std::int64_t* position) {
  if (text.empty() || text.size() > largest_position_digits) return false;
  std::int64_t value = 0;
  for (char letter : text) {
    if (!is_digit(letter)) return false;
    value = value * 10 + (letter - '0');
  }
  *position = value;
  return true;
}

// One number as htslib reads a FORMAT float: the nearest double to the
// decimal, rounded to float. Plain decimals only ([-]digits[.digits],
// [-].digits); anything else (exponents, inf, nan, hex, signs, spaces) is
// declined. `allow_negative` is for fields only checked, never used.
inline bool parse_float(Cursor& cursor, double* value, bool allow_negative) {
  const char* start = cursor.at;
  const char* at = cursor.at;
  const char* const end = cursor.end;
  const bool negative = allow_negative && at < end && *at == '-';
  if (negative) ++at;
  // Digits past the 19th wrap the mantissa; such numbers go to strtod.
  std::uint64_t mantissa = 0;
  const char* digits_start = at;
  while (at < end && is_digit(*at)) mantissa = mantissa * 10 + static_cast<unsigned>(*at++ - '0');
  int digits = static_cast<int>(at - digits_start);
  int decimals = 0;
  if (at < end && *at == '.') {
    const char* fraction = ++at;
    while (at < end && is_digit(*at)) mantissa = mantissa * 10 + static_cast<unsigned>(*at++ - '0');
    decimals = static_cast<int>(at - fraction);
    digits += decimals;
  }
  if (digits == 0 || (at < end && (*at == 'e' || *at == 'E'))) return false;
  double nearest = 0.0;
  if (digits <= largest_exact_digits) {
    nearest = static_cast<double>(mantissa) / powers_of_ten[decimals];
    if (negative) nearest = -nearest;
  } else {
    nearest = std::strtod(std::string(start, at).c_str(), nullptr);
  }
  cursor.at = at;
  *value = static_cast<double>(static_cast<float>(nearest));
  return true;
}

// A FORMAT value htslib reads as missing: "." not followed by a digit.
bool take_missing(Cursor& cursor) {
  if (cursor.peek() != '.' || is_digit(cursor.peek_next())) return false;
  ++cursor.at;
  return true;
}

// Comma-separated numbers of a FORMAT field that is only checked.
bool skip_numbers(Cursor& cursor, bool fractional) {
  while (true) {
    if (!take_missing(cursor)) {
      if (fractional) {
        double unused = 0.0;
        if (!parse_float(cursor, &unused, true)) return false;
      } else {
        if (cursor.peek() == '-') ++cursor.at;
        if (!is_digit(cursor.peek())) return false;
        while (is_digit(cursor.peek())) ++cursor.at;
      }
    }
    if (cursor.peek() != ',') return true;
    ++cursor.at;
  }
}

void skip_text(Cursor& cursor) {
  while (cursor.at < cursor.end && *cursor.at != ':' && *cursor.at != '\t') ++cursor.at;
}

bool FastLineDecoder::split_fixed_columns(std::string_view line, std::string_view* columns,
                                          const char** samples) const {
  const char* at = line.data();
  const char* end = at + line.size();
  for (int column_idx = 0; column_idx < fixed_columns; ++column_idx) {
    const char* tab = static_cast<const char*>(std::memchr(at, '\t', static_cast<std::size_t>(end - at)));
    if (!tab) return false;
    columns[column_idx] = std::string_view(at, static_cast<std::size_t>(tab - at));
    at = tab + 1;
  }
  *samples = at;
  return true;
}

bool only_letters_of(std::string_view text, const char* allowed) {
  for (char letter : text) {
    if (!std::strchr(allowed, letter) || letter == '\0') return false;
  }
  return !text.empty();
}

// Every ';'-separated entry (up to '=' when `keys_end_at_equals`) is declared.
bool all_declared(std::string_view list, const std::unordered_set<std::string>& declared,
                  bool keys_end_at_equals) {
  std::size_t start = 0;
  while (start <= list.size()) {
    const std::size_t semicolon = std::min(list.find(';', start), list.size());
    std::string_view entry = list.substr(start, semicolon - start);
    if (keys_end_at_equals) entry = entry.substr(0, std::min(entry.find('='), entry.size()));
    if (entry.empty() || declared.find(std::string(entry)) == declared.end()) return false;
    start = semicolon + 1;
  }
  return true;
}

// CHROM, ID, QUAL, FILTER and INFO: only values htslib takes without a
// complaint or a change to its header.
bool FastLineDecoder::check_site_columns(const std::string_view* columns) const {
  const std::string_view chromosome = columns[0];
  if (layout_.contig_names.find(std::string(chromosome)) == layout_.contig_names.end() &&
      !is_plain_name(chromosome)) {
    return false;
  }
  const std::string_view id = columns[2];
  if (id.empty()) return false;
  for (char letter : id) {
    if (letter <= ' ' || letter > '~') return false;
  }
  const std::string_view quality = columns[5];
  if (quality != "." && !only_letters_of(quality, "0123456789.eE+-")) return false;
  const std::string_view filter = columns[6];
  if (filter != "." && !all_declared(filter, layout_.filter_keys, false)) return false;
  const std::string_view info = columns[7];
  if (info != "." && !all_declared(info, layout_.info_keys, true)) return false;
  return true;
}

// REF and the ALT alleles: bases, "*", or a symbolic <ID>.
bool FastLineDecoder::split_alleles(std::string_view ref, std::string_view alt) {
  std::vector<std::string_view>& alleles = scratch_.alleles;
  alleles.clear();
  if (ref.empty()) return false;
  for (char letter : ref) {
    if (!is_base(letter)) return false;
  }
  alleles.push_back(ref);
  if (alt == ".") return false;  // no ALT allele: nothing to test, left to htslib
  std::size_t start = 0;
  while (start <= alt.size()) {
    const std::size_t comma = std::min(alt.find(',', start), alt.size());
    const std::string_view allele = alt.substr(start, comma - start);
    start = comma + 1;
    if (allele.empty()) return false;
    bool plain = allele == "*";
    if (!plain && allele.size() > 2 && allele.front() == '<' && allele.back() == '>') {
      plain = allele.find_first_of("<>,\t ", 1) == allele.size() - 1;
    }
    if (!plain) {
      plain = true;
      for (char letter : allele) plain = plain && is_base(letter);
    }
    if (!plain) return false;
    alleles.push_back(allele);
  }
  return true;
}

void FastLineDecoder::append_sites(const std::string_view* columns, std::int64_t position) {
  const std::vector<std::string_view>& alleles = scratch_.alleles;
  for (int allele = 1; allele < allele_count_; ++allele) {
    VariantSite site;
    site.chromosome.assign(columns[0].data(), columns[0].size());
    site.position = position;
    site.id.assign(columns[2].data(), columns[2].size());
    site.ref.assign(alleles[0].data(), alleles[0].size());
    site.alt.assign(alleles[allele].data(), alleles[allele].size());
    site.allele_index = allele;
    site.alt_count = allele_count_ - 1;
    site.file_index = origin_.file->file_index;
    site.record_number = origin_.record_number;
    site.source = layout_.field;
    site.has_hard_calls = scratch_.plan.has_genotype;
    out_.sites.push_back(std::move(site));
  }
}

bool FastLineDecoder::decode_line(std::string_view line, std::size_t first_site) {
  if (layout_.sample_count == 0 || std::memchr(line.data(), '\0', line.size())) return false;
  std::string_view columns[fixed_columns];
  const char* samples = nullptr;
  if (!split_fixed_columns(line, columns, &samples)) return false;
  std::int64_t position = 0;
  if (!parse_position(columns[1], &position) || !check_site_columns(columns)) return false;
  if (!split_alleles(columns[3], columns[4])) return false;
  if (scratch_.plan.layout != layout_.serial || scratch_.plan.format != columns[8]) {
    layout_.plan_format(columns[8], scratch_.plan);
  }
  if (!scratch_.plan.usable) return false;

  allele_count_ = static_cast<int>(scratch_.alleles.size());
  append_sites(columns, position);
  columns_ = reserve_site_columns(out_, first_site);
  return decode_samples(Cursor{samples, line.data() + line.size()});
}

// The commonest layout of imputed data, GT:DS on a biallelic site, in one
// tight loop: a fully called diploid GT of 0s and 1s and a plain DS number
// are handled inline; anything else in a sample goes through the general
// field decoders, which give the same result.
bool FastLineDecoder::decode_biallelic_gt_ds(Cursor cursor) {
  const std::size_t sample_count = layout_.sample_count;
  double* const dosages = columns_.dosages;
  std::uint8_t* const ploidy = columns_.ploidy;
  std::int8_t* const calls = columns_.diploid_calls;
  for (std::size_t sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
    const char* at = cursor.at;
    const bool plain_call = cursor.end - at >= 4 && (at[0] == '0' || at[0] == '1') &&
                            (at[1] == '/' || at[1] == '|') && (at[2] == '0' || at[2] == '1') &&
                            at[3] == ':';
    if (plain_call) {
      ploidy[sample_idx] = 2;
      calls[sample_idx] = static_cast<std::int8_t>((at[0] - '0') + (at[2] - '0'));
      cursor.at = at + 4;
    } else {
      if (!decode_genotype(cursor, sample_idx)) return false;
      if (cursor.peek() != ':') {
        fill_omitted_field(FieldRole::dosage, sample_idx);
        if (!finish_sample(cursor, sample_idx)) return false;
        continue;
      }
      ++cursor.at;
    }
    double value = 0.0;
    if (take_missing(cursor)) {
      dosages[sample_idx] = missing_dosage;
    } else {
      if (!parse_float(cursor, &value, false)) return false;
      if (!(value >= 0.0 && value <= diploid_dosage_limit)) return false;  // an error: htslib's path
      dosages[sample_idx] = value;
    }
    if (cursor.peek() == ',' || cursor.peek() == ':') return false;  // more values or fields: general loop
    if (!finish_sample(cursor, sample_idx)) return false;
  }
  return true;
}

// After a sample: a tab before the next one, the end of the line after the last.
bool FastLineDecoder::finish_sample(Cursor& cursor, std::size_t sample_idx) const {
  if (sample_idx + 1 == layout_.sample_count) return cursor.at == cursor.end;
  if (cursor.peek() != '\t') return false;
  ++cursor.at;
  return true;
}

bool FastLineDecoder::decode_samples(Cursor cursor) {
  const std::vector<FieldRole>& roles = scratch_.plan.roles;
  if (allele_count_ == 2 && roles.size() == 2 && roles[0] == FieldRole::genotype &&
      roles[1] == FieldRole::dosage && layout_.field == DosageField::ds) {
    return decode_biallelic_gt_ds(cursor);
  }
  const std::size_t role_count = roles.size();
  const std::size_t sample_count = layout_.sample_count;
  for (std::size_t sample_idx = 0; sample_idx < sample_count; ++sample_idx) {
    std::size_t role_idx = 0;
    while (true) {
      if (!decode_sample_field(roles[role_idx], cursor, sample_idx)) return false;
      ++role_idx;
      if (cursor.peek() != ':') break;
      if (role_idx == role_count) return false;  // more values than FORMAT names
      ++cursor.at;
    }
    // Trailing fields may be left out (VCF 4.3 section 1.6.2): missing.
    for (; role_idx < role_count; ++role_idx) fill_omitted_field(roles[role_idx], sample_idx);
    // More columns than samples are left to htslib's path.
    if (!finish_sample(cursor, sample_idx)) return false;
  }
  return true;
}

bool FastLineDecoder::decode_sample_field(FieldRole role, Cursor& cursor, std::size_t sample_idx) {
  switch (role) {
    case FieldRole::genotype: return decode_genotype(cursor, sample_idx);
    case FieldRole::dosage: return decode_values(cursor, sample_idx);
    case FieldRole::integer: return skip_numbers(cursor, false);
    case FieldRole::real: return skip_numbers(cursor, true);
    case FieldRole::text: skip_text(cursor); return true;
  }
  return false;
}

void FastLineDecoder::fill_omitted_field(FieldRole role, std::size_t sample_idx) {
  if (role == FieldRole::genotype) {
    // htslib stores an omitted GT as one missing allele.
    store_hard_call(columns_, sample_idx, allele_count_, nullptr, 0, 1, true,
                    layout_.field == DosageField::gt, layout_.haploid_dosage);
  } else if (role == FieldRole::dosage) {
    scratch_.values[0] = missing_dosage;
    store_values(sample_idx, 1);
  }
}

// GT: alleles ('.' or a number) joined by '/' or '|'.
bool FastLineDecoder::decode_genotype(Cursor& cursor, std::size_t sample_idx) {
  int called_alleles[largest_fast_ploidy];
  int length = 0;
  int called = 0;
  bool any_missing = false;
  while (true) {
    const char letter = cursor.peek();
    if (letter == '.') {
      ++cursor.at;
      any_missing = true;
    } else if (is_digit(letter)) {
      int allele = 0;
      int digits = 0;
      while (is_digit(cursor.peek())) {
        if (++digits > largest_allele_digits) return false;
        allele = allele * 10 + (*cursor.at++ - '0');
      }
      // An allele beyond ALT is an error, which htslib's path reports.
      if (allele >= allele_count_ || called == largest_fast_ploidy) return false;
      called_alleles[called++] = allele;
    } else {
      return false;  // empty, or not a GT: htslib's path decides
    }
    ++length;
    const char separator = cursor.peek();
    if (separator != '/' && separator != '|') break;
    ++cursor.at;
  }
  store_hard_call(columns_, sample_idx, allele_count_, called_alleles, called, length, any_missing,
                  layout_.field == DosageField::gt, layout_.haploid_dosage);
  return true;
}

// DS or GP: comma-separated numbers, '.' for a missing one.
bool FastLineDecoder::decode_values(Cursor& cursor, std::size_t sample_idx) {
  std::vector<double>& values = scratch_.values;
  int given = 0;
  while (true) {
    if (static_cast<std::size_t>(given) == values.size()) values.resize(values.size() * 2);
    if (take_missing(cursor)) {
      values[given] = missing_dosage;
    } else if (!parse_float(cursor, &values[given], false)) {
      return false;
    }
    ++given;
    if (cursor.peek() != ',') break;
    ++cursor.at;
  }
  return store_values(sample_idx, given);
}

bool FastLineDecoder::store_values(std::size_t sample_idx, int given) {
  const double* values = scratch_.values.data();
  const SampleOutcome outcome =
      layout_.field == DosageField::gp
          ? convert_probabilities(columns_, sample_idx, values, given, allele_count_)
          : convert_dosages(columns_, sample_idx, values, given, allele_count_);
  // Rejected values are errors; htslib's path reports them with their text.
  return outcome.kind == SampleOutcome::ok;
}

struct ParserScratch {
  kstring_t text = {0, 0, nullptr};
  bcf1_t* record = nullptr;
  ParserScratch() : record(bcf_init()) {
    if (!record) throw std::bad_alloc();
  }
  ~ParserScratch() {
    free(text.s);
    bcf_destroy(record);
  }
  ParserScratch(const ParserScratch&) = delete;
  ParserScratch& operator=(const ParserScratch&) = delete;
};

int declared_format_id(const bcf_hdr_t* header, const char* tag) {
  const int tag_id = bcf_hdr_id2int(header, BCF_DT_ID, tag);
  if (tag_id < 0 || !bcf_hdr_idinfo_exists(header, BCF_HL_FMT, tag_id)) return -1;
  return tag_id;
}

// htslib's parser on a private copy of the header, then the same decoding
// as a BCF record.
void decode_with_htslib(const RecordOrigin& origin, std::string_view line, DosageBlock& out) {
  const VcfTextDecoder::Impl& layout = origin.file->text_decoder->impl();
  thread_local ParserScratch scratch;
  bcf_hdr_t* header = layout.borrow_header();
  struct HeaderReturn {
    const VcfTextDecoder::Impl& layout;
    bcf_hdr_t* header;
    ~HeaderReturn() { layout.return_header(header); }
  } header_return{layout, header};

  scratch.text.l = 0;
  if (kputsn(line.data(), line.size(), &scratch.text) < 0) throw std::bad_alloc();
  const int status = vcf_parse(&scratch.text, header, scratch.record);
  // Undeclared contigs and tags are only warnings: htslib adds them to the header.
  const int fatal_errors = scratch.record->errcode & ~(BCF_ERR_CTG_UNDEF | BCF_ERR_TAG_UNDEF);
  if (status != 0 || fatal_errors != 0) {
    std::string where = origin.file->path + ", record " + std::to_string(origin.record_number);
    const std::string place = place_in_line(line);
    if (!place.empty()) where += " (" + place + ")";
    throw Error(ExitCode::genotype_input, where,
                "htslib could not parse this record (its message is above)",
                "make the record follow VCF 4.3; `bcftools view` stops at the same place");
  }
  const FormatTagIds tags{declared_format_id(header, layout.dosage_key.c_str()),
                          declared_format_id(header, "GT")};
  decode_htslib_record(origin, scratch.record, layout.sample_count, tags, out);
}

}  // namespace

DecodePath decode_vcf_text_record(const RecordOrigin& origin, std::string_view line, DosageBlock& out,
                                  DecodeMode mode) {
  const VcfTextDecoder::Impl& layout = origin.file->text_decoder->impl();
  if (mode != DecodeMode::general_only) {
    thread_local FastScratch scratch;
    if (FastLineDecoder(layout, origin, out, scratch).run(line)) return DecodePath::fast;
    if (mode == DecodeMode::fast_only) return DecodePath::declined;
  }
  decode_with_htslib(origin, line, out);
  return DecodePath::general;
}

std::size_t text_sample_count(const FileInfo& file) { return file.sample_ids->size(); }

DecodePath decode_vcf_text_record(const std::shared_ptr<const FileInfo>& file,
                                  std::uint64_t record_number, std::string_view line,
                                  DosageBlock& out, DecodeMode mode) {
  RecordOrigin origin;
  origin.file = file;
  origin.record_number = record_number;
  origin.chromosome = std::string(first_column(line));
  return decode_vcf_text_record(origin, line, out, mode);
}

std::shared_ptr<const FileInfo> make_text_file_info(const std::string& header_text,
                                                    const std::string& path, DosageField field,
                                                    int haploid_dosage) {
  std::unique_ptr<bcf_hdr_t, HeaderDeleter> header(bcf_hdr_init("r"));
  if (!header) throw std::bad_alloc();
  std::string text = header_text;
  if (bcf_hdr_parse(header.get(), text.data()) != 0) {
    throw Error(ExitCode::genotype_input, path + ", header", "htslib could not parse the VCF header",
                "check the ## lines and the #CHROM line");
  }
  auto info = std::make_shared<FileInfo>();
  info->path = path;
  info->field = field;
  info->tag_id = declared_format_id(header.get(), dosage_field_name(field));
  info->gt_tag_id = declared_format_id(header.get(), "GT");
  info->haploid_dosage = haploid_dosage;
  const int sample_count = bcf_hdr_nsamples(header.get());
  info->sample_ids = std::make_shared<const std::vector<std::string>>(
      header->samples, header->samples + sample_count);
  info->text_decoder = std::make_shared<VcfTextDecoder>(header.get(), field, haploid_dosage);
  return info;
}

}  // namespace tamis::genotype_detail
