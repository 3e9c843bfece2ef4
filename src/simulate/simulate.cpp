#include "tamis/simulate.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstdio>
#include <optional>
#include <string>
#include <vector>

#include "genes.hpp"
#include "haplotype_blocks.hpp"
#include "people.hpp"
#include "polygenic.hpp"
#include "random.hpp"
#include "tamis/errors.hpp"
#include "tamis/results_writer.hpp"

namespace tamis {
namespace {

using simulation::Cohort;
using simulation::HaplotypeBlocks;
using simulation::kVillages;
using simulation::Person;
using simulation::Random;

// Within a run of linked common variants each allele is the neighbour's with
// this probability; a run ends at a variant with the break probability.
constexpr double kHaplotypeCopy = 0.9;
constexpr double kHaplotypeBreak = 0.15;
// A child passes on one parent's haplotype until a crossover, which falls
// between neighbouring variants with this probability (about 150 segments per
// parent over 3,000 variants, so that relatives' sharing stays near its
// expectation, as over a whole human genome).
constexpr double kCrossover = 0.05;
// --causal-genes: the share of a chosen gene's rare variants that carry an
// effect, the effects (fev1_litres in litres, winter_wheeze on the logit
// scale, per minor allele, in the direction of lower lung capacity and more
// wheeze), and the chance that a variant acts the other way.
constexpr double kGeneCarrierShare = 0.5;
constexpr double kGeneFev1Effect = -0.35;
constexpr double kGeneWheezeEffect = 1.0;
constexpr double kGeneOppositeChance = 0.2;
constexpr std::uint64_t kGeneEffectStream = 5;

struct CausalVariant {
  std::size_t variant_idx = 0;
  int trait = 0;  // 0: fev1_litres, 1: winter_wheeze
  double effect = 0.0;
  std::string gene;  // --causal-genes: the gene whose rare variants carry effects
  std::string chromosome;
  std::int64_t position = 0;
  std::vector<int> genotypes;
};

double clamp(double value, double low, double high) { return std::min(high, std::max(low, value)); }

struct VariantDesign {
  double frequency_a = 0.0;
  double frequency_b = 0.0;
  double imputation_quality = 1.0;
  bool triallelic = false;
  double second_alt_frequency = 0.0;
  bool rare = false;  // drawn with an ancestral frequency below 1%
};

VariantDesign design_variant(const SimulationOptions& options, Random& random) {
  VariantDesign design;
  const bool rare = random.bernoulli(options.rare_fraction);
  const double ancestral = rare ? random.uniform(0.0005, 0.01) : random.uniform(0.01, 0.5);
  const double spread = std::sqrt(0.02 * ancestral * (1.0 - ancestral));
  design.frequency_a = clamp(ancestral + spread * random.normal(), 0.0002, 0.98);
  design.frequency_b = clamp(ancestral + spread * random.normal(), 0.0002, 0.98);
  design.imputation_quality = random.bernoulli(0.3) ? 1.0 : random.uniform(0.6, 1.0);
  design.triallelic = random.bernoulli(0.01);
  design.second_alt_frequency = random.uniform(0.005, 0.05);
  design.rare = rare;
  return design;
}

void append_dosage(double dosage, std::string& line) {
  const long thousandths = std::lround(clamp(dosage, 0.0, 2.0) * 1000.0);
  line += static_cast<char>('0' + thousandths / 1000);
  line += '.';
  const long fraction = thousandths % 1000;
  line += static_cast<char>('0' + fraction / 100);
  line += static_cast<char>('0' + (fraction / 10) % 10);
  line += static_cast<char>('0' + fraction % 10);
}

std::string vcf_header(const SimulationOptions& options, const Cohort& cohort,
                       const std::vector<std::int64_t>& contig_lengths) {
  std::string header = "##fileformat=VCFv4.3\n";
  header += "##source=tamis simulate: Saltmarsh Ridge synthetic cohort, seed " + std::to_string(options.seed) + "\n";
  for (std::size_t contig_idx = 0; contig_idx < contig_lengths.size(); ++contig_idx) {
    header += "##contig=<ID=" + std::to_string(contig_idx + 1) + ",length=" +
              std::to_string(contig_lengths[contig_idx]) + ">\n";
  }
  header += "##FORMAT=<ID=GT,Number=1,Type=String,Description=\"Genotype\">\n";
  header += "##FORMAT=<ID=DS,Number=A,Type=Float,Description=\"Expected count of each ALT allele\">\n";
  header += "#CHROM\tPOS\tID\tREF\tALT\tQUAL\tFILTER\tINFO\tFORMAT";
  for (std::size_t person_idx : cohort.samples) header += "\t" + cohort.people[person_idx].id;
  header += "\n";
  return header;
}

std::vector<CausalVariant> choose_causal_variants(const SimulationOptions& options, Random& random) {
  std::vector<CausalVariant> causal;
  for (int trait = 0; trait < 2; ++trait) {
    for (int causal_idx = 0; causal_idx < options.causal_per_trait; ++causal_idx) {
      CausalVariant variant;
      // Spread the planted variants evenly along the genome, away from the ends.
      const double place = (causal_idx + 0.5 + 0.25 * trait) / options.causal_per_trait;
      variant.variant_idx = static_cast<std::size_t>(place * (options.variants - 1));
      variant.trait = trait;
      const double sign = random.bernoulli(0.5) ? 1.0 : -1.0;
      variant.effect = sign * (trait == 0 ? 0.16 : 0.55);
      causal.push_back(variant);
    }
  }
  return causal;
}

CausalVariant* find_causal(std::vector<CausalVariant>& causal, std::size_t variant_idx) {
  for (CausalVariant& variant : causal) {
    if (variant.variant_idx == variant_idx) return &variant;
  }
  return nullptr;
}

// The demo's variant IDs follow a scheme of our own that no public database
// uses, so that nobody reads an invented association as a claim about a real
// variant (and the results' rsid column reads #NA for the demo).
std::string invented_variant_id(std::size_t variant_idx) {
  char id[40];
  std::snprintf(id, sizeof id, "saltmarsh_v%06zu", variant_idx + 1);
  return id;
}

const char* random_base(Random& random) {
  static const char* bases[] = {"A", "C", "G", "T"};
  return bases[random.index(4)];
}

// A founder's alleles come from the frequency that their ancestry gives, or
// stay those of the neighbouring variant within a run of linked variants.
void draw_founder_alleles(const VariantDesign& design, double frequency, bool linked, Random& random,
                          int* alleles) {
  for (int copy_idx = 0; copy_idx < 2; ++copy_idx) {
    int& allele = alleles[copy_idx];
    if (linked && random.bernoulli(kHaplotypeCopy)) continue;  // keeps the neighbour's allele
    allele = random.bernoulli(frequency) ? 1 : 0;
    if (allele == 0 && design.triallelic && random.bernoulli(design.second_alt_frequency)) allele = 2;
  }
}

// A child's alleles: one from the father and one from the mother, each from the
// haplotype that parent is passing on (`passed_on`), which changes at a crossover.
void inherit_alleles(const Person& child, const std::vector<std::array<int, 2>>& haplotypes, bool contig_start,
                     Random& random, std::array<std::uint8_t, 2>& passed_on, int* alleles) {
  const int parents[2] = {child.father, child.mother};
  for (int parent_idx = 0; parent_idx < 2; ++parent_idx) {
    std::uint8_t& copy = passed_on[parent_idx];
    if (contig_start) {
      copy = static_cast<std::uint8_t>(random.index(2));
    } else if (random.bernoulli(kCrossover)) {
      copy ^= 1;
    }
    alleles[parent_idx] = haplotypes[static_cast<std::size_t>(parents[parent_idx])][copy];
  }
}

struct VariantPositions {
  std::vector<std::vector<std::int64_t>> of_contig;
  std::vector<std::int64_t> contig_lengths;
};

VariantPositions draw_positions(const SimulationOptions& options, Random& random) {
  const int per_chromosome = std::max(1, options.variants / options.chromosomes);
  VariantPositions positions;
  positions.contig_lengths.assign(static_cast<std::size_t>(options.chromosomes), 0);
  positions.of_contig.resize(positions.contig_lengths.size());
  for (int variant_idx = 0; variant_idx < options.variants; ++variant_idx) {
    const std::size_t contig =
        std::min<std::size_t>(variant_idx / per_chromosome, positions.contig_lengths.size() - 1);
    std::int64_t& last = positions.contig_lengths[contig];
    last = (last == 0 ? 10000 : last) + 200 + static_cast<std::int64_t>(random.index(20000));
    positions.of_contig[contig].push_back(last);
  }
  for (auto& length : positions.contig_lengths) length += 10000;
  return positions;
}

// --causal-genes: which variants lie in a chosen gene, and the effects of
// those of its rare variants that carry one. Its draws come from a stream of
// their own, so that the genotypes stay those of the cohort without it.
class GeneEffects {
 public:
  GeneEffects(const std::vector<simulation::SimulatedGene>& genes, const std::vector<std::size_t>& chosen,
              std::size_t variant_count, std::uint64_t seed)
      : random_(simulation::stream_seed(seed, kGeneEffectStream)), gene_of_(variant_count, -1) {
    for (std::size_t gene_idx : chosen) {
      const simulation::SimulatedGene& gene = genes[gene_idx];
      names_.push_back(gene.name);
      directions_.push_back(random_.bernoulli(0.5) ? 1.0 : -1.0);
      for (std::size_t variant_idx = gene.first_variant; variant_idx <= gene.last_variant; ++variant_idx) {
        if (gene_of_[variant_idx] < 0) gene_of_[variant_idx] = static_cast<int>(names_.size() - 1);
      }
    }
  }

  // A new effect carrier (trait 0; its trait-1 twin is added at the end),
  // or nothing for a variant outside the chosen genes, not rare, or not drawn.
  std::optional<CausalVariant> draw_carrier(std::size_t variant_idx, const VariantDesign& design) {
    const int gene = gene_of_[variant_idx];
    if (gene < 0 || !design.rare || design.triallelic || !random_.bernoulli(kGeneCarrierShare)) return std::nullopt;
    const double sign = directions_[static_cast<std::size_t>(gene)] * (random_.bernoulli(kGeneOppositeChance) ? -1 : 1);
    CausalVariant carrier;
    carrier.variant_idx = variant_idx;
    carrier.effect = sign;  // scaled per trait in add_trait_effects
    carrier.gene = names_[static_cast<std::size_t>(gene)];
    return carrier;
  }

  // Each carrier acts on both traits.
  static void add_trait_effects(std::vector<CausalVariant>& carriers, std::vector<CausalVariant>& causal) {
    for (CausalVariant& carrier : carriers) {
      CausalVariant wheeze = carrier;
      carrier.trait = 0;
      carrier.effect *= kGeneFev1Effect;
      wheeze.trait = 1;
      wheeze.effect *= kGeneWheezeEffect;
      causal.push_back(std::move(carrier));
      causal.push_back(std::move(wheeze));
    }
  }

 private:
  Random random_;
  std::vector<int> gene_of_;  // index into names_, -1 outside the chosen genes
  std::vector<std::string> names_;
  std::vector<double> directions_;
};

// --haplotype-blocks: a founder's alleles come from the haplotypes of the
// variant's block; a triallelic record's second ALT replaces some REF alleles
// as without blocks.
void draw_block_alleles(const HaplotypeBlocks& blocks, const VariantDesign& design, double ancestry, Random& random,
                        std::array<int, 2>& haplotypes, int* alleles) {
  blocks.draw_founder_alleles(ancestry, random, haplotypes, alleles);
  if (!design.triallelic) return;
  for (int copy_idx = 0; copy_idx < 2; ++copy_idx) {
    if (alleles[copy_idx] == 0 && random.bernoulli(design.second_alt_frequency)) alleles[copy_idx] = 2;
  }
}

// Writes the VCF record by record; keeps the genotypes of the planted variants
// (and of the chosen genes' carriers in `carriers`, with `gene_effects`).
// People are visited parents first, so that children inherit this variant's alleles.
// With `blocks` (--haplotype-blocks) founders draw from the blocks' haplotypes.
void write_genotypes(const SimulationOptions& options, const Cohort& cohort, const VariantPositions& variant_positions,
                     std::vector<CausalVariant>& causal, GeneEffects* gene_effects, HaplotypeBlocks* blocks,
                     std::vector<CausalVariant>& carriers, Random& random, const std::string& path) {
  const std::vector<Person>& people = cohort.people;
  const std::vector<std::int64_t>& contig_lengths = variant_positions.contig_lengths;
  const std::vector<std::vector<std::int64_t>>& positions = variant_positions.of_contig;

  BgzfTextFile vcf(path);
  vcf.write(vcf_header(options, cohort, contig_lengths));
  std::vector<std::array<std::uint8_t, 2>> passed_on(people.size());
  std::vector<std::array<int, 2>> founder_haplotypes(blocks ? people.size() : 0);
  std::string line;
  std::size_t variant_idx = 0;
  for (std::size_t contig = 0; contig < positions.size(); ++contig) {
    bool previous_common = false;
    bool contig_start = true;
    std::vector<std::array<int, 2>> haplotypes(people.size(), std::array<int, 2>{0, 0});
    for (std::int64_t position : positions[contig]) {
      CausalVariant* planted = find_causal(causal, variant_idx);
      VariantDesign design = design_variant(options, random);
      if (planted) {
        // Planted effects sit on common variants, so the demo shows clear peaks.
        const double frequency = random.uniform(0.15, 0.45);
        design.frequency_a = frequency + 0.02;
        design.frequency_b = frequency - 0.02;
        design.triallelic = false;
        planted->chromosome = std::to_string(contig + 1);
        planted->position = position;
      }
      std::optional<CausalVariant> carrier;
      if (gene_effects && !planted) carrier = gene_effects->draw_carrier(variant_idx, design);
      if (carrier) {
        carrier->chromosome = std::to_string(contig + 1);
        carrier->position = position;
      }
      if (blocks) {
        const double rare_frequency = 0.5 * (design.frequency_a + design.frequency_b);
        blocks->start_variant(variant_idx, design.rare, rare_frequency, planted != nullptr);
      }
      // Neighbouring common variants share haplotypes, so that associations
      // show as peaks of several variants in linkage disequilibrium.
      const bool common = !design.triallelic && design.frequency_a > 0.05 && design.frequency_b > 0.05;
      const bool linked = common && previous_common && !random.bernoulli(kHaplotypeBreak);
      const char* ref = random_base(random);
      const char* alt = random_base(random);
      while (alt == ref) alt = random_base(random);
      const char* alt2 = random_base(random);
      while (alt2 == ref || alt2 == alt) alt2 = random_base(random);
      line.clear();
      line += std::to_string(contig + 1) + "\t" + std::to_string(position) + "\t";
      line += random.bernoulli(0.7) ? invented_variant_id(variant_idx) : std::string(".");
      line += std::string("\t") + ref + "\t" + alt + (design.triallelic ? std::string(",") + alt2 : "");
      line += "\t.\tPASS\t.\tGT:DS";
      for (std::size_t person_idx = 0; person_idx < people.size(); ++person_idx) {
        const Person& person = people[person_idx];
        const double frequency =
            blocks ? blocks->expected_frequency(person.ancestry)
                   : person.ancestry * design.frequency_a + (1.0 - person.ancestry) * design.frequency_b;
        int* alleles = haplotypes[person_idx].data();
        if (person.is_founder() && blocks) {
          draw_block_alleles(*blocks, design, person.ancestry, random, founder_haplotypes[person_idx], alleles);
        } else if (person.is_founder()) {
          draw_founder_alleles(design, frequency, linked, random, alleles);
        } else {
          inherit_alleles(person, haplotypes, contig_start, random, passed_on[person_idx], alleles);
        }
        if (!person.genotyped) continue;
        if (planted) planted->genotypes.push_back(alleles[0] + alleles[1]);
        if (carrier) carrier->genotypes.push_back(alleles[0] + alleles[1]);
        if (random.bernoulli(options.missing_rate)) {
          line += design.triallelic ? "\t./.:.,." : "\t./.:.";
          continue;
        }
        line += '\t';
        line += static_cast<char>('0' + alleles[0]);
        line += '/';
        line += static_cast<char>('0' + alleles[1]);
        line += ':';
        const int first_count = (alleles[0] == 1) + (alleles[1] == 1);
        // Imperfect imputation pulls the dosage towards the expected count.
        const double quality = design.imputation_quality;
        append_dosage(quality * first_count + (1.0 - quality) * 2.0 * frequency, line);
        if (design.triallelic) {
          line += ',';
          append_dosage((alleles[0] == 2) + (alleles[1] == 2), line);
        }
      }
      line += '\n';
      vcf.write(line);
      if (carrier) carriers.push_back(std::move(*carrier));
      previous_common = common;
      contig_start = false;
      ++variant_idx;
    }
  }
  vcf.commit(IndexKind::tabix_vcf);
}

double mean_case_probability(const std::vector<double>& base_logits, double intercept) {
  double total = 0.0;
  for (double logit : base_logits) total += 1.0 / (1.0 + std::exp(-(logit + intercept)));
  return total / static_cast<double>(base_logits.size());
}

// The intercept whose average case probability matches the target prevalence.
double solve_intercept(const std::vector<double>& base_logits, double prevalence) {
  double low = -20.0, high = 20.0;
  for (int step = 0; step < 100; ++step) {
    const double middle = 0.5 * (low + high);
    (mean_case_probability(base_logits, middle) < prevalence ? low : high) = middle;
  }
  return 0.5 * (low + high);
}

std::string maybe_missing(const std::string& value, double missing_rate, Random& random) {
  return random.bernoulli(missing_rate) ? std::string("NA") : value;
}

std::string fixed(double value, int decimals) {
  char text[64];
  std::snprintf(text, sizeof text, "%.*f", decimals, value);
  return text;
}

// `genetic_values` (empty without --heritability) holds each sample's
// standardised polygenic values. The polygenic part takes h² of the residual
// variance of fev1_litres (0.5² litres², the rest is noise) and, on the logit
// scale of winter_wheeze, σ²_g / (σ²_g + π²/3) = h².
void write_table(const SimulationOptions& options, const Cohort& cohort, const std::vector<CausalVariant>& causal,
                 const std::vector<std::array<double, 2>>& genetic_values, Random& random, const std::string& path) {
  const std::size_t samples = cohort.samples.size();
  const double heritability = options.heritability;
  const double noise_sd = 0.5 * std::sqrt(1.0 - heritability);
  const double genetic_sd[2] = {0.5 * std::sqrt(heritability),
                                std::sqrt(heritability / (1.0 - heritability) * M_PI * M_PI / 3.0)};
  std::vector<double> fev1(samples), wheeze_logit(samples);
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const Person& person = cohort.people[cohort.samples[sample_idx]];
    fev1[sample_idx] = 4.2 - 0.025 * (person.age - 45) - 0.7 * person.female +
                       0.6 * (person.ancestry - 0.5) + kVillages[person.village].fev1_shift +
                       noise_sd * random.normal();
    wheeze_logit[sample_idx] = 0.02 * (person.age - 45) + 0.3 * !person.female + 1.0 * (person.ancestry - 0.5);
    if (genetic_values.empty()) continue;
    fev1[sample_idx] += genetic_sd[0] * genetic_values[sample_idx][0];
    wheeze_logit[sample_idx] += genetic_sd[1] * genetic_values[sample_idx][1];
  }
  for (const CausalVariant& variant : causal) {
    auto& target = variant.trait == 0 ? fev1 : wheeze_logit;
    for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
      target[sample_idx] += variant.effect * variant.genotypes[sample_idx];
    }
  }
  const double intercept = solve_intercept(wheeze_logit, options.prevalence);

  PlainTextFile table(path);
  table.write("participant\tage\tsex\tvillage\tpc1\tpc2\tpc3\tpc4\tfev1_litres\twinter_wheeze\n");
  const double rate = options.missing_rate;
  for (std::size_t sample_idx = 0; sample_idx < samples; ++sample_idx) {
    const Person& person = cohort.people[cohort.samples[sample_idx]];
    const bool is_case = random.bernoulli(1.0 / (1.0 + std::exp(-(wheeze_logit[sample_idx] + intercept))));
    if (!person.in_table) continue;
    std::string row = person.id;
    row += "\t" + maybe_missing(std::to_string(person.age), rate, random);
    row += "\t" + maybe_missing(person.female ? "F" : "M", rate, random);
    row += "\t" + maybe_missing(kVillages[person.village].name, rate, random);
    for (double pc : person.pcs) row += "\t" + fixed(pc, 6);
    row += "\t" + maybe_missing(fixed(fev1[sample_idx], 4), rate, random);
    row += "\t" + maybe_missing(is_case ? "1" : "0", rate, random);
    table.write(row + "\n");
  }
  // A few questionnaires came back from people who were never genotyped.
  const int extra = std::max(1, options.samples / 200);
  for (int extra_idx = 0; extra_idx < extra; ++extra_idx) {
    char id[32];
    std::snprintf(id, sizeof id, "SR9%04d", extra_idx + 1);
    table.write(std::string(id) + "\t50\tF\tgull_point\t0.0\t0.0\t0.0\t0.0\t3.9000\t0\n");
  }
  table.commit();
}

// With --causal-genes a fifth column names the gene of each carrier (#NA
// for the single planted variants); without it the file keeps four columns.
void write_truth(const std::vector<CausalVariant>& causal, bool with_genes, const std::string& path) {
  PlainTextFile truth(path);
  truth.write(with_genes ? "trait\tchromosome\tposition\teffect\tgene\n" : "trait\tchromosome\tposition\teffect\n");
  for (const CausalVariant& variant : causal) {
    std::string line = std::string(variant.trait == 0 ? "fev1_litres" : "winter_wheeze") + "\t" + variant.chromosome +
                       "\t" + std::to_string(variant.position) + "\t" + fixed(variant.effect, 3);
    if (with_genes) line += "\t" + (variant.gene.empty() ? std::string("#NA") : variant.gene);
    truth.write(line + "\n");
  }
  truth.commit();
}

// --locus-signals K: the block around the first planted variant of
// fev1_litres, and K - 1 more planted variants of fev1_litres in it, with the
// same effect, listed after it in the truth file.
simulation::SignalLocus plant_signal_locus(const SimulationOptions& options, const VariantPositions& positions,
                                           std::vector<CausalVariant>& causal) {
  if (options.locus_signals == 0) return {};
  const std::size_t anchor = causal.front().variant_idx;
  std::size_t contig_first = 0, contig = 0;
  while (anchor >= contig_first + positions.of_contig[contig].size()) {
    contig_first += positions.of_contig[contig++].size();
  }
  simulation::SignalLocus locus =
      simulation::place_signal_locus(anchor, options.locus_signals, contig_first, positions.of_contig[contig].size());
  bool collides = locus.signal_variants.empty();
  for (std::size_t signal_idx = 1; signal_idx < locus.signal_variants.size(); ++signal_idx) {
    collides = collides || find_causal(causal, locus.signal_variants[signal_idx]) != nullptr;
  }
  if (collides) {
    throw Error(ExitCode::usage, "tamis simulate",
                "--locus-signals: the chromosome of the first planted variant of fev1_litres is too short for a "
                "locus of 25 variants around it, apart from the other planted variants",
                "ask for more --variants or fewer --chromosomes");
  }
  std::vector<CausalVariant> signals;
  for (std::size_t signal_idx = 1; signal_idx < locus.signal_variants.size(); ++signal_idx) {
    CausalVariant signal = causal.front();
    signal.variant_idx = locus.signal_variants[signal_idx];
    signals.push_back(signal);
  }
  causal.insert(causal.begin() + 1, signals.begin(), signals.end());
  return locus;
}

void check_options(const SimulationOptions& options) {
  auto refuse = [](const std::string& what, const std::string& fix) {
    throw Error(ExitCode::usage, "tamis simulate", what, fix);
  };
  if (options.samples < 10) refuse("--samples must be at least 10", "ask for more samples");
  if (options.variants < 1) refuse("--variants must be at least 1", "ask for more variants");
  if (options.chromosomes < 1 || options.chromosomes > 22) refuse("--chromosomes must be 1 to 22", "");
  if (options.prevalence <= 0.0 || options.prevalence >= 1.0) refuse("--prevalence must lie strictly between 0 and 1", "");
  if (options.missing_rate < 0.0 || options.missing_rate >= 0.5) refuse("--missing-rate must lie in [0, 0.5)", "");
  if (options.rare_fraction < 0.0 || options.rare_fraction > 1.0) refuse("--rare-fraction must lie in [0, 1]", "");
  if (options.causal_per_trait < 0 || options.causal_per_trait > options.variants / 4) {
    refuse("--causal must be between 0 and a quarter of --variants", "");
  }
  if (!(options.family_share >= 0.0 && options.family_share <= 1.0)) {
    refuse("--families must lie in [0, 1]", "give the share of samples in families, for example 0.3");
  }
  if (!(options.heritability >= 0.0 && options.heritability < 1.0)) {
    refuse("--heritability must lie in [0, 1)", "for example 0.6");
  }
  if (options.causal_genes < 0) refuse("--causal-genes must be 0 or more", "for example 5");
  if (options.haplotype_block_variants < 0) {
    refuse("--haplotype-blocks must be 0 (no blocks) or more",
           "give the mean number of variants per block, for example 20");
  }
  if (options.locus_signals < 0 || options.locus_signals > 3) {
    refuse("--locus-signals must be 0 to 3", "for example 2");
  }
  if (options.locus_signals > 0 && options.haplotype_block_variants == 0) {
    refuse("--locus-signals needs --haplotype-blocks", "add --haplotype-blocks 20, for example");
  }
  if (options.locus_signals > 0 && options.causal_per_trait == 0) {
    refuse("--locus-signals needs a planted variant of fev1_litres to build the locus around",
           "drop --causal 0");
  }
}

}  // namespace

SimulationOutputs simulate_cohort(const SimulationOptions& options) {
  check_options(options);
  check_output_prefix_writable(options.out_prefix);
  SimulationOutputs outputs{options.out_prefix + ".vcf.gz", options.out_prefix + ".traits.tsv",
                            options.out_prefix + ".truth.tsv", "", options.out_prefix + ".genes.bed"};
  Random random(options.seed);
  const Cohort cohort = simulation::make_cohort(options, random);
  std::vector<CausalVariant> causal = choose_causal_variants(options, random);
  const VariantPositions positions = draw_positions(options, random);
  const std::vector<simulation::SimulatedGene> genes = simulation::lay_out_genes(positions.of_contig, options.seed);
  if (static_cast<std::size_t>(options.causal_genes) > genes.size()) {
    throw Error(ExitCode::usage, "tamis simulate",
                "--causal-genes " + std::to_string(options.causal_genes) + " asks for more genes than the " +
                    std::to_string(genes.size()) + " laid out over the variants",
                "ask for fewer genes or more --variants");
  }
  std::optional<GeneEffects> gene_effects;
  if (options.causal_genes > 0) {
    gene_effects.emplace(genes, simulation::choose_causal_genes(genes.size(), options.causal_genes, options.seed),
                         static_cast<std::size_t>(options.variants), options.seed);
  }
  std::optional<HaplotypeBlocks> blocks;
  if (options.haplotype_block_variants > 0) {
    const simulation::SignalLocus locus = plant_signal_locus(options, positions, causal);
    blocks.emplace(positions.of_contig, options.haplotype_block_variants, locus, options.seed);
    outputs.blocks_path = options.out_prefix + ".blocks.bed";
  }
  std::vector<CausalVariant> carriers;
  write_genotypes(options, cohort, positions, causal, gene_effects ? &*gene_effects : nullptr,
                  blocks ? &*blocks : nullptr, carriers, random, outputs.vcf_path);
  if (blocks) blocks->write_bed(positions.of_contig, outputs.blocks_path);
  GeneEffects::add_trait_effects(carriers, causal);
  simulation::write_gene_bed(genes, positions.of_contig, outputs.genes_path);
  const std::vector<std::array<double, 2>> genetic_values =
      options.heritability > 0.0 ? simulation::draw_genetic_values(cohort, options.seed)
                                 : std::vector<std::array<double, 2>>();
  write_table(options, cohort, causal, genetic_values, random, outputs.table_path);
  write_truth(causal, options.causal_genes > 0, outputs.truth_path);
  if (options.family_share > 0.0) {
    outputs.families_path = options.out_prefix + ".families.tsv";
    simulation::write_families(cohort, outputs.families_path);
  }
  return outputs;
}

}  // namespace tamis
