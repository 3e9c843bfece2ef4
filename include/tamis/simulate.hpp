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
//
// The cohort's genes (invented names SRG0001, SRG0002, ...) are windows of 5
// to 60 consecutive simulated variants, with gaps between some genes and a
// few overlapping their neighbour; they are written as PREFIX.genes.bed
// (BED: chromosome, start - 1, end, name) for `scan --sets`. With
// --causal-genes K, K genes chosen at random carry rare-variant effects:
// about half of each gene's rare variants (frequency below 1%) act on both
// traits, -0.35 litres of fev1_litres and +1.0 on the logit of
// winter_wheeze per allele (each gene in one direction, with one variant in
// five acting the other way). The truth file then gains a column `gene`
// naming each carrier's gene (#NA for the single planted variants).
// The genes and their effects draw from random streams of their own, so
// that without --causal-genes every other file is the same as before, and
// with it the genotypes stay the same and only the traits and the truth
// file change.
//
// With --haplotype-blocks N each chromosome is cut into haplotype blocks of
// about N variants, written as PREFIX.blocks.bed (names SRB0001, ...):
// founders carry a few haplotypes per block, so that neighbouring variants
// are in linkage disequilibrium and variants of different blocks nearly
// independent (src/simulate/haplotype_blocks.hpp). Without it the older,
// weaker linkage between neighbouring common variants stays, and every file
// is the same as before. --locus-signals K (1 to 3, with blocks) builds the
// block around the first planted variant of fev1_litres so that K causal
// variants in partial LD (r² about 0.3) act on the trait, all with its
// effect; the other K - 1 follow it in the truth file.
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
  int causal_genes = 0;          // genes with rare-variant effects on both traits (--causal-genes)
  int haplotype_block_variants = 0;  // mean variants per haplotype block; 0: no blocks (--haplotype-blocks)
  int locus_signals = 0;         // causal variants of fev1_litres at one locus in LD, 0 to 3 (--locus-signals)
};

struct SimulationOutputs {
  std::string vcf_path;     // PREFIX.vcf.gz (+ .tbi)
  std::string table_path;   // PREFIX.traits.tsv
  std::string truth_path;   // PREFIX.truth.tsv: the planted effects
  std::string families_path;  // PREFIX.families.tsv: each sample's family; empty without families
  std::string genes_path;     // PREFIX.genes.bed: the genes, for scan --sets
  std::string blocks_path;    // PREFIX.blocks.bed: the haplotype blocks; empty without them
};

SimulationOutputs simulate_cohort(const SimulationOptions& options);

}  // namespace tamis
