// Conditioning variants (--condition-on): their dosages, read once through
// the genotype index before the scan, become extra covariates of every
// trait's null model.
#pragma once

#include <Eigen/Dense>
#include <optional>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"
#include "tamis/scan.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {

struct ConditionVariant {
  std::string requested;        // as the user wrote it
  std::string label;            // chromosome:position:ref:alt as the file has it
  std::vector<double> dosages;  // one per genotype sample; NaN marks a missing dosage
};

// Reads the dosages of options.condition_on: an entry is a chr:pos:ref:alt
// (read through the index) or an ID of the VCF ID column (the files are
// then read whole). Throws tamis::Error (genotype_input) for an entry no
// record matches, an ID that names a multi-allelic record (the allele must
// be named) or several records.
std::vector<ConditionVariant> read_condition_variants(const ScanOptions& options);

// Appends one design column per variant, named "condition LABEL": its
// dosages over the set's analysis samples, a missing dosage replaced by the
// mean of the others. Throws tamis::Error (model) for a variant that does
// not vary among the analysis samples.
void add_condition_columns(const std::vector<ConditionVariant>& variants, AnalysisSet& set);

// One site's dosages over a trait's analysis samples (genotype_index[k] is
// the genotype sample of analysis sample k), each missing one replaced by the
// mean of the called ones; nothing when they do not vary.
struct AnalysisDosages {
  Eigen::VectorXd values;
  double sum = 0.0;     // over the called dosages
  double called = 0.0;  // how many were called
};
std::optional<AnalysisDosages> dosages_over_samples(const double* dosages, const std::vector<std::size_t>& genotype_index);

// "chr1:1234:A:G" of a site as its file writes it.
std::string site_label(const VariantSite& site);

}  // namespace tamis
