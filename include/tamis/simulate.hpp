// `tamis simulate`: a synthetic cohort for the demo and the tests.
//
// The scenario is invented: the Saltmarsh Ridge cohort, residents of three
// coastal villages whose families descend from two founding groups. Each
// person carries a share of each group's ancestry, which shifts both allele
// frequencies and the traits, so principal-component-like covariates matter.
// The traits are lung capacity (`fev1_litres`, quantitative) and a history of
// winter wheeze (`winter_wheeze`, binary), each with planted causal variants.
// With --families some residents are parents, children, siblings, half-siblings
// or cousins of others; with --heritability both traits carry a polygenic
// component that relatives share.
#pragma once

#include <cstdint>
#include <string>

namespace tamis {

struct SimulationOptions {
  std::string out_prefix;
  std::uint64_t seed = 1;
  int samples = 2000;
  int variants = 3000;
  int chromosomes = 3;
  double prevalence = 0.25;      // target share of cases for the binary trait
  double missing_rate = 0.01;    // missing genotypes and table values
  double rare_fraction = 0.3;    // share of variants with minor allele frequency below 1%
  int causal_per_trait = 6;      // 0 gives a null cohort
  double family_share = 0.0;     // share of samples in families of 2 to 6 (--families)
  double heritability = 0.0;     // h² of a polygenic component of both traits (--heritability)
};

struct SimulationOutputs {
  std::string vcf_path;     // PREFIX.vcf.gz (+ .tbi)
  std::string table_path;   // PREFIX.traits.tsv
  std::string truth_path;   // PREFIX.truth.tsv: the planted effects
  std::string families_path;  // PREFIX.families.tsv: each sample's family; empty without families
};

SimulationOutputs simulate_cohort(const SimulationOptions& options);

}  // namespace tamis
