// tamis report: per-trait Manhattan and QQ plots (PNG and SVG), the genomic
// inflation factor, lead loci grouped by distance, and one self-contained
// HTML page, from finished results files; for traits with set results, the
// same two plots of the sets and a table of the top sets; given the cohort's
// genotype files, a regional plot of each lead locus, coloured by LD with
// its lead.
#pragma once

#include <cstddef>
#include <cstdint>
#include <optional>
#include <string>
#include <vector>

#include "tamis/genotype_reader.hpp"
#include "tamis/trait_table.hpp"

namespace tamis {

// Regional plots need the genotypes the scan read and what decided each
// trait's analysis samples (samples with the trait and every covariate, less
// those the sample lists leave out), given as they were given to the scan.
struct RegionalPlotOptions {
  std::vector<std::string> genotype_paths;  // empty: no regional plots; each file needs its .tbi/.csi index
  DosageField dosage_field = DosageField::automatic;
  int haploid_dosage = 1;
  std::string traits_path;
  TableOptions table;
  // Unset: the covariates each results file's metadata sidecar lists.
  std::optional<std::vector<std::string>> covariates;
  std::string keep_samples_path, drop_samples_path;
  std::size_t plots_per_trait = 10;  // the most significant lead loci of each trait
  // The --out prefix of `tamis signals`; empty: none. PREFIX.TRAIT.signals.tsv
  // and PREFIX.TRAIT.credible.tsv then mark other signals' leads and
  // credible-set members.
  std::string signals_prefix;
};

struct ReportOptions {
  // PREFIX.TRAIT.tsv.gz files, one trait each. A trait's set results
  // PREFIX.TRAIT.sets.tsv.gz (scan --sets) are found beside its file; set
  // files listed here too (as a shell pattern would list them) are taken as
  // the set results of their trait, whose results file must then be listed.
  std::vector<std::string> results;
  // Writes OUT.summary.tsv, OUT.loci.tsv, OUT.html, OUT.TRAIT.{manhattan,qq}.{png,svg}; with set
  // results also OUT.top_sets.tsv and OUT.TRAIT.sets.{manhattan,qq}.{png,svg}.
  std::string out_prefix;
  double lead_threshold = 5e-8;      // a lead locus needs p below this
  std::int64_t locus_radius = 500000;  // bases either side of a lead that its locus takes
  std::size_t label_limit = 20;      // lead loci named on each Manhattan plot (most significant first)
  std::size_t page_loci_limit = 50;  // lead loci listed per trait on the HTML page (the .tsv has all)
  std::size_t top_sets = 50;         // sets of smallest overall p per trait in OUT.top_sets.tsv and on the page
  // With genotype files: OUT.TRAIT.locus-K.{png,svg} for the K-th lead locus
  // and OUT.locus_ld.tsv, every plotted variant's r^2 with its lead.
  RegionalPlotOptions regional;
};

// What was found for one trait, for the command to print.
struct TraitReport {
  std::string trait;
  std::string results_path;
  std::size_t n_variants = 0;
  double lambda_gc = 0;  // NaN when no row has a score statistic
  std::size_t n_lead_loci = 0;
  std::size_t manhattan_points_drawn = 0;
  std::size_t qq_points_drawn = 0;
  // Set results (empty path: none). set_lambda is the median chi-square(1)
  // quantile of overall_p over 0.454936 (NaN when no set has one); 0 without sets.
  std::string sets_path;
  std::size_t n_sets = 0;
  double set_lambda = 0;
  std::size_t regional_plots = 0;
};

struct ReportSummary {
  std::vector<std::string> written_files;  // in the order written
  std::vector<TraitReport> traits;
};

// Throws tamis::Error: usage for bad options, results_input for a malformed
// results file, output when a file cannot be written.
ReportSummary run_report(const ReportOptions& options);

// lambda_GC = median(score chi-square) / 0.454936, the median of chi-square(1)
// (Devlin & Roeder 1999). NaN values are ignored; NaN when none remain.
double compute_lambda_gc(std::vector<float> score_chisq);

}  // namespace tamis
