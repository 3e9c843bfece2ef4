// Related samples in a scan: the relatedness matrix read once, placed on
// each trait's analysis samples, and each trait's linear mixed null model.
#pragma once

#include <cstdint>
#include <string>
#include <vector>

#include "scan/trait_pass.hpp"
#include "tamis/relatedness_file.hpp"

namespace tamis {

struct ScanRelatedness {
  std::vector<std::string> paths;
  RelatednessFileContents matrix;
  // For each genotype sample, its index among the matrix's IDs, or -1.
  std::vector<std::int64_t> matrix_index_of_sample;
};

// Reads --relatedness and matches its IDs to the genotype samples; IDs that
// the genotype files lack are counted and ignored, and the log says so.
ScanRelatedness load_scan_relatedness(const std::vector<std::string>& paths,
                                      const std::vector<std::string>& genotype_samples);

// The matrix restricted to the analysis samples (genotype_index[s] is the
// genotype sample of analysis sample s), in analysis order; a sample with no
// diagonal entry has 1.
SparseRelatedness relatedness_among(const ScanRelatedness& relatedness, const std::vector<std::size_t>& genotype_index);

// Given the trait's plain null model (trait.model, whose design has lost
// any collinear columns), fits the linear mixed model by REML (a binary
// trait: the logistic mixed model, fit_logistic_mixed_null_model), logs its
// variance components, and sets trait.mixed and replaces trait.model by the
// least-squares fit of the whitened data, which the score kernel then uses
// unchanged.
void fit_mixed_null_model(const ScanRelatedness& relatedness, const std::vector<std::string>& genotype_samples,
                          TraitContext& trait);

// A binary trait's logistic mixed model by PQL; trait.logistic_mixed is set
// and trait.model becomes the least-squares fit of the whitened working
// model with sigma2 fixed at 1. Throws tamis::Error (model) for fewer than
// 10 cases or controls, naming both counts, or a fit that does not converge.
void fit_logistic_mixed_null_model(const ScanRelatedness& relatedness,
                                   const std::vector<std::string>& genotype_samples, TraitContext& trait);

// The mixed model's part in the per-trait stage (trait.mixed or
// trait.logistic_mixed): the kernel reads the block with its missing
// dosages imputed and its rows whitened (row_of_sample[s] is the kernel row
// of analysis sample s); hits are refitted by maximum likelihood (linear)
// or Laplace likelihoods (logistic).
std::unique_ptr<TraitModel> make_mixed_model(const TraitContext& trait, std::vector<std::size_t> row_of_sample);

}  // namespace tamis
