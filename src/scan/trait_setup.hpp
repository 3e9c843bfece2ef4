// A trait's analysis samples and null model, as the scan prepares them;
// `signals` prepares its traits the same way.
#pragma once

#include <string>
#include <vector>

#include "scan/related_samples.hpp"
#include "scan/trait_pass.hpp"
#include "tamis/scan.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {

// The trait's analysis samples and design (logged), rank-normalised when
// the options ask for it. `excluded` comes from excluded_samples.
AnalysisSet prepare_analysis_set(const ScanOptions& options, const TraitTable& table,
                                 const std::vector<std::string>& samples, const std::vector<bool>& excluded,
                                 const std::string& trait);

// Fits trait.model from trait.set (and the mixed model with relatedness),
// and logs it; errors name the table and column.
void fit_trait_null_model(const ScanOptions& options, const std::vector<std::string>& samples,
                          const ScanRelatedness* relatedness, TraitContext& trait);

}  // namespace tamis
