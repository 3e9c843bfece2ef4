// `tamis signals`: independent signals at lead loci by stepwise conditional
// selection, their joint fit, and a credible set per signal.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"
#include "tamis/scan.hpp"

namespace tamis {

struct SignalOptions {
  ScanOptions scan;  // inputs, traits, covariates, models, --condition-on, threads, output prefix
  std::string loci_path;  // the loci file `report` writes (PREFIX.loci.tsv); or:
  std::vector<std::string> region_texts;  // --region, as given (they name their loci)
  double select_below = 5e-8;             // a further signal needs its conditional p below this
  std::int64_t window_radius = 500000;    // base pairs either side of a lead (a locus' span is always covered)
  std::size_t max_signals = 10;
  double prior_effect_sd = 0.0;           // 0: default_prior_effect_sd of the trait
};

struct SignalsSummary {
  std::vector<std::string> files;
  std::size_t loci = 0;     // loci followed up, over every trait
  std::size_t signals = 0;  // signals found, over every trait
};

// Throws tamis::Error for anything the user can fix; the files appear under
// their final names only once complete.
SignalsSummary run_signals(const SignalOptions& options);

std::string signals_path(const std::string& out_prefix, const std::string& trait);
std::string credible_path(const std::string& out_prefix, const std::string& trait);

}  // namespace tamis
