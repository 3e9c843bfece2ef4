// The data behind a regional plot: every results row in a lead locus's
// window, each with its LD r^2 with the lead, measured on the cohort's own
// dosages over the trait's analysis samples. Only the window's records are
// read, through the genotype files' index.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "report/lead_loci.hpp"
#include "report/trait_results.hpp"
#include "tamis/genotype_reader.hpp"

namespace tamis::report {

struct WindowVariant {
  std::string variant_id;
  std::int64_t position = 0;
  float neg_log_10_p = 0;  // NaN where the file has #NA
  double r_squared = 0;    // NaN: not in the genotype files, or no variation among the analysis samples
};

struct LocusWindow {
  std::size_t rank = 0;              // 1: the trait's most significant lead
  std::string chromosome;            // as the results file writes it
  std::int64_t first = 0, last = 0;  // lead position -/+ the locus radius (first at least 1)
  std::int64_t lead_position = 0;
  std::string lead_variant_id;
  std::string lead_name;             // its rsid when it has one
  std::string lead_p_text;           // the lead's p_value as written
  std::size_t lead_sample_count = 0; // the lead row's n: the scan's analysis samples
  std::vector<WindowVariant> variants;  // the results rows in the window, in file order
  std::size_t lead_idx = 0;          // the lead among them
  std::size_t unmeasured = 0;        // variants whose r^2 is NaN
};

// The windows of the `count` most significant leads (leads are in that order).
std::vector<LocusWindow> make_locus_windows(const TraitResults& results, const std::vector<LeadLocus>& leads,
                                            std::int64_t radius, std::size_t count);

// Fills every window's variants from the results file in one pass. Throws
// tamis::Error (results_input) for a damaged file.
void collect_window_rows(const std::string& results_path, std::vector<LocusWindow>& windows);

// Reads the window's records through the index and sets each variant's r^2
// with the lead over `analysis_samples` (positions in the files' sample
// order), missing dosages mean-imputed per variant as the scan imputes them.
// Variants are matched to sites by variant_id (CHROMOSOME_POS_REF_ALT).
// Throws tamis::Error (genotype_input) when the lead is not in the files or
// does not vary among the analysis samples.
void measure_window_ld(const GenotypeReaderOptions& genotypes, const std::vector<std::size_t>& analysis_samples,
                       LocusWindow& window);

}  // namespace tamis::report
