// The rules that turn one sample's GT, DS or GP values into dosages and hard
// calls. Both decoders (htslib records in record_decoding.cpp, VCF text in
// fast_vcf.cpp) go through these functions, so that they agree to the bit:
// same checks, same arithmetic, same order of additions.
#pragma once

#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstdint>
#include <limits>

namespace tamis::genotype_detail {

constexpr double missing_dosage = std::numeric_limits<double>::quiet_NaN();
// Room for the rounding of values written with few decimals.
constexpr double dosage_tolerance = 1e-4;
constexpr double diploid_dosage_limit = 2.0 + dosage_tolerance;

// One record's columns in a DosageBlock: for each ALT allele (1-based) a
// run of sample_count values.
struct SiteColumns {
  double* dosages = nullptr;
  std::uint8_t* ploidy = nullptr;
  std::int8_t* diploid_calls = nullptr;
  std::size_t sample_count = 0;

  double& dosage(int allele, std::size_t sample_idx) const {
    return dosages[(allele - 1) * sample_count + sample_idx];
  }
  std::uint8_t& ploidy_of(int allele, std::size_t sample_idx) const {
    return ploidy[(allele - 1) * sample_count + sample_idx];
  }
  std::int8_t& diploid_call(int allele, std::size_t sample_idx) const {
    return diploid_calls[(allele - 1) * sample_count + sample_idx];
  }
};

// One sample's GT: `length` alleles written, of which `called` were not
// missing (their indices in called_alleles). A partly missing call ("0/.")
// says nothing reliable about the dosage, so it gives NaN.
inline void store_hard_call(const SiteColumns& columns, std::size_t sample_idx, int allele_count,
                            const int* called_alleles, int called, int length, bool any_missing,
                            bool gives_dosages, int haploid_dosage) {
  const bool full_diploid = length == 2 && !any_missing;
  const bool dosage_known = length > 0 && !any_missing;
  const int copy_weight = length == 1 ? haploid_dosage : 1;
  const auto stored_ploidy = static_cast<std::uint8_t>(std::min(called, 255));
  for (int allele = 1; allele < allele_count; ++allele) {
    int copies = 0;
    for (int called_idx = 0; called_idx < called; ++called_idx) {
      copies += called_alleles[called_idx] == allele;
    }
    columns.ploidy_of(allele, sample_idx) = stored_ploidy;
    columns.diploid_call(allele, sample_idx) = full_diploid ? static_cast<std::int8_t>(copies) : -1;
    if (gives_dosages) {
      columns.dosage(allele, sample_idx) =
          dosage_known ? static_cast<double>(copies * copy_weight) : missing_dosage;
    }
  }
}

// Genotypes of a diploid call over `allele_count` alleles (VCF 4.3 section
// 1.6.2, Number=G): n(n+1)/2; also the index of the first genotype (0,n).
inline std::int64_t diploid_genotype_count(int allele_count) {
  return static_cast<std::int64_t>(allele_count) * (allele_count + 1) / 2;
}

// What one sample's DS or GP values amount to. `value` and `allele` name the
// offending number when the values are rejected.
struct SampleOutcome {
  enum Kind { ok, wrong_count, not_probability, out_of_range } kind = ok;
  double value = 0.0;
  int allele = 0;
};

// DS: one expected ALT count per ALT allele (Number=A). `values` holds the
// `given` values written for the sample, NaN where one was missing.
inline SampleOutcome convert_dosages(const SiteColumns& columns, std::size_t sample_idx,
                                     const double* values, int given, int allele_count) {
  const bool only_missing = given == 0 || (given == 1 && std::isnan(values[0]));
  if (only_missing) {
    for (int allele = 1; allele < allele_count; ++allele) columns.dosage(allele, sample_idx) = missing_dosage;
    return {};
  }
  if (given != allele_count - 1) return SampleOutcome{SampleOutcome::wrong_count, 0.0, 0};
  for (int allele = 1; allele < allele_count; ++allele) {
    const double value = values[allele - 1];
    if (std::isnan(value)) {
      columns.dosage(allele, sample_idx) = missing_dosage;
      continue;
    }
    if (!(value >= 0.0 && value <= diploid_dosage_limit)) {
      return SampleOutcome{SampleOutcome::out_of_range, value, allele};
    }
    columns.dosage(allele, sample_idx) = value;
  }
  return {};
}

// GP: the expected count of each ALT allele, sum over genotypes of (copies of
// the allele) x (probability). Diploid genotypes come in the VCF order, (j,k)
// with j <= k at index k(k+1)/2 + j (VCF 4.3 section 1.6.2); a haploid call
// has one probability per allele.
inline SampleOutcome convert_probabilities(const SiteColumns& columns, std::size_t sample_idx,
                                           const double* values, int given, int allele_count) {
  // In 64 bits: with tens of thousands of alleles the count passes INT_MAX.
  const std::int64_t diploid_count = diploid_genotype_count(allele_count);
  const int haploid_count = allele_count;
  auto set_missing = [&] {
    for (int allele = 1; allele < allele_count; ++allele) columns.dosage(allele, sample_idx) = missing_dosage;
  };
  if (given != diploid_count && given != haploid_count) {
    const bool only_missing = given == 0 || (given == 1 && std::isnan(values[0]));
    if (only_missing) {
      set_missing();
      return {};
    }
    return SampleOutcome{SampleOutcome::wrong_count, 0.0, 0};
  }
  for (int value_idx = 0; value_idx < given; ++value_idx) {
    const double probability = values[value_idx];
    if (std::isnan(probability)) {
      set_missing();
      return {};
    }
    if (probability < 0.0 || probability > 1.0 + dosage_tolerance) {
      return SampleOutcome{SampleOutcome::not_probability, probability, 0};
    }
  }
  const int ploidy = given == diploid_count ? 2 : 1;
  for (int allele = 1; allele < allele_count; ++allele) columns.dosage(allele, sample_idx) = 0.0;
  if (ploidy == 1) {
    for (int allele = 1; allele < allele_count; ++allele) columns.dosage(allele, sample_idx) = values[allele];
  } else {
    for (int second = 0; second < allele_count; ++second) {
      for (int first = 0; first <= second; ++first) {
        const double probability = values[diploid_genotype_count(second) + first];
        if (first > 0) columns.dosage(first, sample_idx) += probability;
        if (second > 0) columns.dosage(second, sample_idx) += probability;
      }
    }
  }
  for (int allele = 1; allele < allele_count; ++allele) {
    const double dosage = columns.dosage(allele, sample_idx);
    if (!(dosage >= 0.0 && dosage <= ploidy + dosage_tolerance)) {
      return SampleOutcome{SampleOutcome::out_of_range, dosage, allele};
    }
  }
  return {};
}

}  // namespace tamis::genotype_detail
