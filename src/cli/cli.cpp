#include "tamis/cli.hpp"

#include <CLI/CLI.hpp>
#include <signal.h>
#include <unistd.h>

#include <cmath>
#include <cstdlib>
#include <cstdio>
#include <set>
#include <thread>
#include <tuple>

#include "tamis/errors.hpp"
#include "tamis/merge.hpp"
#include "tamis/relatedness_run.hpp"
#include "tamis/report.hpp"
#include "tamis/results_writer.hpp"
#include "tamis/run_log.hpp"
#include "tamis/scan.hpp"
#include "tamis/signals.hpp"
#include "tamis/simulate.hpp"

namespace tamis {
namespace {

[[noreturn]] void refuse_option(const std::string& option, const std::string& what, const std::string& fix) {
  throw Error(ExitCode::usage, option, what, fix);
}

void check_readable(const std::string& option, const std::string& path) {
  if (access(path.c_str(), R_OK) != 0) {
    refuse_option(option, "cannot read '" + path + "': " + std::strerror(errno),
                  "check the path and the file's permissions");
  }
}

std::string quote_argument(const std::string& argument) {
  if (!argument.empty() && argument.find_first_of(" \t\"'$\\") == std::string::npos) return argument;
  std::string quoted = "'";
  for (char c : argument) quoted += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return quoted + "'";
}

std::string join_command_line(int argc, char** argv) {
  std::string text;
  for (int arg_idx = 0; arg_idx < argc; ++arg_idx) {
    if (arg_idx) text += ' ';
    text += quote_argument(argv[arg_idx]);
  }
  return text;
}

std::vector<std::string> split_list(const std::string& text) {
  std::vector<std::string> items;
  std::string item;
  for (char c : text) {
    if (c == ',') {
      items.push_back(item);
      item.clear();
    } else {
      item += c;
    }
  }
  items.push_back(item);
  return items;
}

// Raw option values as CLI11 fills them; checked and converted by check_scan_options.
struct ScanArguments {
  std::vector<std::string> genotypes;
  std::string traits;
  std::string sample_column;
  std::vector<std::string> trait_names;
  std::string covariates;
  std::vector<std::string> trait_kinds;
  std::string dosage_from = "auto";
  double confirm_below = 1e-4;
  double disagreement_flag = 1.0;
  std::string out;
  int threads = 0;
  std::string chromosome_codes = "ssf";
  std::string genome_assembly;
  std::string missing_tokens;
  bool quiet = false;
  bool resume = false;
  int checkpoint_blocks = 64;
  std::string shard;
  std::vector<std::string> regions;
  std::string binary_score = "spa";
  std::string penalized_refit = "auto";
  std::string variant_list;
  QcFloors floors;
  std::string keep_samples;
  std::vector<std::string> relatedness;
  std::vector<std::string> condition_on;
  std::string condition_list;
  std::string interaction_with;
  std::string robust_errors = "hc0";
  std::string drop_samples;
  std::vector<std::string> rank_normalize;
  int haploid_dosage = 1;
  std::vector<std::string> from_results;
  double below = 1e-4;
  std::string sets;
  double set_maf_ceiling = 0.01;
  std::string set_weights = "beta";
  double set_collapse_mac = 0.0;
  std::size_t set_max_variants = 5000;
  double set_exact_below = 1e-3;
};

// --interaction-with and --robust-errors. The exposure joins the
// covariates when they do not list it: its main effect is always in the
// null model.
void check_interaction_options(const ScanArguments& arguments, ScanOptions& options) {
  const std::map<std::string, RobustErrors> variances = {
      {"hc0", RobustErrors::hc0}, {"hc3", RobustErrors::hc3}, {"off", RobustErrors::off}};
  if (!variances.count(arguments.robust_errors)) {
    refuse_option("--robust-errors", "'" + arguments.robust_errors + "' is not hc0, hc3 or off",
                  "hc0 (the default) is White's sandwich; hc3 suits small samples; off keeps model-based variances");
  }
  options.robust_errors = variances.at(arguments.robust_errors);
  if (arguments.interaction_with.empty()) return;
  if (!arguments.relatedness.empty()) {
    refuse_option("--interaction-with", "interaction tests take unrelated samples and cannot be combined with --relatedness",
                  "run the interaction scan without --relatedness, on unrelated samples (--keep-samples)");
  }
  if (!arguments.sets.empty()) {
    refuse_option("--interaction-with", "interaction tests are of single variants and cannot be combined with --sets",
                  "run the set tests and the interaction scan separately");
  }
  options.interaction_with = arguments.interaction_with;
  if (std::find(options.covariates.begin(), options.covariates.end(), options.interaction_with) ==
      options.covariates.end()) {
    options.covariates.push_back(options.interaction_with);
  }
}

// --sets and the options that shape the set tests.
void check_set_options(const ScanArguments& arguments, SetScanOptions& sets) {
  if (arguments.sets.empty()) return;
  check_readable("--sets", arguments.sets);
  sets.path = arguments.sets;
  if (!(arguments.set_maf_ceiling > 0.0 && arguments.set_maf_ceiling <= 0.5)) {
    refuse_option("--set-maf-ceiling", "must be a minor allele frequency above 0 and at most 0.5",
                  "the default, 0.01, keeps rare variants; 0.5 keeps every variant");
  }
  sets.maf_ceiling = arguments.set_maf_ceiling;
  const std::map<std::string, SetWeighting> weightings = {
      {"beta", SetWeighting::beta}, {"flat", SetWeighting::flat}, {"listed", SetWeighting::listed}};
  if (!weightings.count(arguments.set_weights)) {
    refuse_option("--set-weights", "'" + arguments.set_weights + "' is not beta, flat or listed",
                  "beta weighs by the Beta(1, 25) density of the minor allele frequency");
  }
  sets.weighting = weightings.at(arguments.set_weights);
  if (!(arguments.set_collapse_mac >= 0.0)) {
    refuse_option("--set-collapse-mac", "must be zero (no collapsing) or a minor allele count", "10 is usual");
  }
  sets.collapse_mac = arguments.set_collapse_mac;
  if (arguments.set_max_variants < 1) refuse_option("--set-max-variants", "must be at least 1", "the default is 5000");
  sets.max_variants = arguments.set_max_variants;
  if (!(arguments.set_exact_below > 0.0 && arguments.set_exact_below <= 1.0)) {
    refuse_option("--set-exact-below", "must be a p-value in (0, 1]", "1 takes every set's tails exactly");
  }
  sets.exact_below = arguments.set_exact_below;
}

void check_trait_names(const std::vector<std::string>& traits) {
  if (traits.empty()) refuse_option("--trait", "no trait given", "name at least one trait column with --trait");
  std::set<std::string> seen;
  for (const std::string& trait : traits) {
    if (trait.empty() || trait.find_first_of("/\\ \t") != std::string::npos) {
      refuse_option("--trait", "trait name '" + trait + "' cannot be part of a file name",
                    "rename the column to letters, digits, '_', '-' or '.'");
    }
    if (!seen.insert(trait).second) refuse_option("--trait", "trait '" + trait + "' is given twice", "list each trait once");
  }
}

std::map<std::string, TraitKind> parse_trait_kinds(const std::vector<std::string>& specs,
                                                   const std::vector<std::string>& traits) {
  std::map<std::string, TraitKind> kinds;
  for (const std::string& spec : specs) {
    const auto equals = spec.find('=');
    const std::string name = spec.substr(0, equals);
    const std::string kind = equals == std::string::npos ? "" : spec.substr(equals + 1);
    if (kind != "binary" && kind != "quantitative") {
      refuse_option("--trait-kind", "'" + spec + "' is not NAME=binary or NAME=quantitative",
                    "write for example --trait-kind winter_wheeze=binary");
    }
    if (std::find(traits.begin(), traits.end(), name) == traits.end()) {
      refuse_option("--trait-kind", "'" + name + "' is not one of the traits given with --trait",
                    "add --trait " + name + " or correct the name");
    }
    kinds[name] = kind == "binary" ? TraitKind::binary : TraitKind::quantitative;
  }
  return kinds;
}

DosageField parse_dosage_field(const std::string& text) {
  if (text == "auto") return DosageField::automatic;
  if (text == "DS") return DosageField::ds;
  if (text == "GP") return DosageField::gp;
  if (text == "GT") return DosageField::gt;
  refuse_option("--dosage-from", "'" + text + "' is not auto, DS, GP or GT", "pick one of auto, DS, GP, GT");
}

void check_floors(const QcFloors& floors) {
  auto check_share = [](const char* option, double value) {
    if (!(value >= 0.0 && value <= 1.0)) refuse_option(option, "must lie between 0 and 1", "");
  };
  check_share("--maf-floor", floors.minor_allele_frequency);
  check_share("--info-floor", floors.info);
  check_share("--call-rate-floor", floors.call_rate);
  check_share("--hwe-floor", floors.hwe_p);
  if (!(floors.minor_allele_count >= 0.0)) refuse_option("--mac-floor", "must be zero or more", "");
}

// K/N with 1 <= K <= N, as --shard and --part take it.
std::pair<int, int> parse_part_of(const std::string& option, const std::string& text) {
  int part = 0, count = 0;
  char tail = 0;
  if (std::sscanf(text.c_str(), "%d/%d%c", &part, &count, &tail) != 2 || count < 1 || part < 1 || part > count) {
    refuse_option(option, "'" + text + "' is not K/N with 1 <= K <= N", "write for example " + option + " 3/20");
  }
  return {part, count};
}

void parse_shard(const std::string& text, ScanOptions& options) {
  if (text.empty()) return;
  std::tie(options.shard, options.shard_count) = parse_part_of("--shard", text);
}

// --threads: 0 (the default) takes every core.
int thread_count_from(int requested) {
  if (requested < 0) refuse_option("--threads", "must be at least 1", "leave it out to use every core");
  const unsigned cores = std::max(1u, std::thread::hardware_concurrency());
  return requested == 0 ? static_cast<int>(cores) : requested;
}

// --condition-on entries, then those of --conditioning-variants: each one variant.
void check_condition_entries(const ScanArguments& arguments, std::vector<std::string>& entries) {
  entries = arguments.condition_on;
  if (!arguments.condition_list.empty()) {
    check_readable("--conditioning-variants", arguments.condition_list);
    for (const std::string& entry : read_condition_list(arguments.condition_list)) entries.push_back(entry);
  }
  std::set<std::string> seen;
  for (const std::string& entry : entries) {
    if (entry.empty() || entry == "." || entry.find_first_of(" \t,") != std::string::npos) {
      refuse_option("--condition-on", "'" + entry + "' is not one variant",
                    "give an ID of the VCF ID column or chr:pos:ref:alt, one per option or line");
    }
    if (!seen.insert(entry).second) refuse_option("--condition-on", "'" + entry + "' is given twice", "");
  }
}

ScanOptions check_scan_options(const ScanArguments& arguments, const std::string& command_line) {
  ScanOptions options;
  // The output location comes first: a scan that cannot write must not start reading.
  check_output_prefix_writable(arguments.out);
  options.out_prefix = arguments.out;
  check_trait_names(arguments.trait_names);
  options.traits = arguments.trait_names;
  options.kind_overrides = parse_trait_kinds(arguments.trait_kinds, arguments.trait_names);
  if (!arguments.covariates.empty()) options.covariates = split_list(arguments.covariates);
  for (const std::string& covariate : options.covariates) {
    if (covariate.empty()) refuse_option("--covariates", "the list has an empty name", "separate names by single commas");
  }
  options.dosage_field = parse_dosage_field(arguments.dosage_from);
  if (!(arguments.confirm_below >= 0.0 && arguments.confirm_below <= 1.0)) {
    refuse_option("--confirm-below", "must be a p-value between 0 and 1", "use 0 to skip confirmation or 1 to confirm all");
  }
  options.confirm_below = arguments.confirm_below;
  if (!(arguments.disagreement_flag > 0.0)) {
    refuse_option("--disagreement-flag", "must be a positive number of log10 units", "the default is 1");
  }
  options.spread_flag = arguments.disagreement_flag;
  options.threads = thread_count_from(arguments.threads);
  if (arguments.chromosome_codes != "ssf" && arguments.chromosome_codes != "as-is") {
    refuse_option("--chromosome-codes", "'" + arguments.chromosome_codes + "' is not ssf or as-is", "");
  }
  options.chromosome_codes = arguments.chromosome_codes == "ssf" ? ChromosomeCodes::ssf : ChromosomeCodes::as_is;
  options.genome_assembly = arguments.genome_assembly;
  options.table.sample_column = arguments.sample_column;
  if (!arguments.missing_tokens.empty()) {
    options.table.missing_tokens = split_list(arguments.missing_tokens);
    options.table.missing_tokens.push_back("");
  }
  for (const std::string& path : arguments.genotypes) check_readable("--genotypes", path);
  check_readable("--traits", arguments.traits);
  options.genotype_paths = arguments.genotypes;
  options.traits_path = arguments.traits;
  options.command_line = command_line;
  options.quiet = arguments.quiet;
  options.resume = arguments.resume;
  if (arguments.checkpoint_blocks < 1) {
    refuse_option("--checkpoint-blocks", "must be at least 1", "the default is 64");
  }
  options.blocks_per_checkpoint = static_cast<std::size_t>(arguments.checkpoint_blocks);
  parse_shard(arguments.shard, options);
  check_floors(arguments.floors);
  options.floors = arguments.floors;
  if (!arguments.keep_samples.empty()) check_readable("--keep-samples", arguments.keep_samples);
  if (!arguments.drop_samples.empty()) check_readable("--drop-samples", arguments.drop_samples);
  options.keep_samples_path = arguments.keep_samples;
  for (const std::string& path : arguments.relatedness) check_readable("--relatedness", path);
  options.relatedness_paths = arguments.relatedness;
  check_condition_entries(arguments, options.condition_on);
  options.drop_samples_path = arguments.drop_samples;
  for (const std::string& trait : arguments.rank_normalize) {
    if (std::find(arguments.trait_names.begin(), arguments.trait_names.end(), trait) == arguments.trait_names.end()) {
      refuse_option("--rank-normalize", "'" + trait + "' is not one of the traits given with --trait", "");
    }
  }
  options.rank_normalize = arguments.rank_normalize;
  if (arguments.haploid_dosage != 1 && arguments.haploid_dosage != 2) {
    refuse_option("--haploid-dosage", "must be 1 or 2", "1 counts a haploid ALT call as one copy, 2 as two");
  }
  options.haploid_dosage = arguments.haploid_dosage;
  if (arguments.binary_score != "spa" && arguments.binary_score != "plain") {
    refuse_option("--binary-score", "'" + arguments.binary_score + "' is not spa or plain", "");
  }
  options.binary_score = arguments.binary_score == "spa" ? BinaryScore::saddlepoint : BinaryScore::plain;
  const std::map<std::string, PenalizedRefit> refits = {
      {"auto", PenalizedRefit::automatic}, {"always", PenalizedRefit::always}, {"never", PenalizedRefit::never}};
  if (!refits.count(arguments.penalized_refit)) {
    refuse_option("--penalized-refit", "'" + arguments.penalized_refit + "' is not auto, always or never", "");
  }
  options.penalized_refit = refits.at(arguments.penalized_refit);
  if (!arguments.variant_list.empty()) {
    check_readable("--variants", arguments.variant_list);
    std::vector<GenomicRegion> positions;
    const bool indexed = select_from_list(arguments.variant_list, options.chromosome_codes, options.selection, positions);
    if (indexed && options.regions.empty() && options.shard_count == 0) options.regions = positions;
  }
  for (const std::string& text : arguments.regions) options.regions.push_back(parse_region(text));
  if (options.shard_count > 0 && !options.regions.empty()) {
    refuse_option("--shard", "--shard and --region cannot be combined", "shard the whole genome, or list regions");
  }
  check_set_options(arguments, options.sets);
  check_interaction_options(arguments, options);
  return options;
}

// The options scan and confirm share: inputs, traits, models and output.
void add_analysis_options(CLI::App* command, ScanArguments& arguments) {
  command->add_option("--genotypes", arguments.genotypes, "VCF, VCF.gz or BCF files, scanned in the order given")
      ->required();
  command->add_option("--traits", arguments.traits, "Trait and covariate table (tab- or comma-separated)")
      ->required();
  command->add_option("--sample-column", arguments.sample_column, "Sample ID column (default: the first)");
  command->add_option("--trait", arguments.trait_names, "Trait column to test (repeatable)")->required();
  command->add_option("--covariates", arguments.covariates, "Covariate columns, comma-separated");
  command->add_option("--trait-kind", arguments.trait_kinds, "NAME=binary|quantitative (repeatable)");
  command->add_option("--dosage-from", arguments.dosage_from, "auto, DS, GP or GT")->capture_default_str();
  command->add_option("--disagreement-flag", arguments.disagreement_flag,
                      "Flag confirmed hits whose tests differ by more than this many log10 units")
      ->capture_default_str();
  command->add_option("--out", arguments.out, "Output prefix")->required();
  command->add_option("--threads", arguments.threads, "Worker threads (default: every core)");
  command->add_option("--chromosome-codes", arguments.chromosome_codes, "ssf or as-is")->capture_default_str();
  command->add_option("--genome-assembly", arguments.genome_assembly,
                      "Assembly recorded in the metadata, e.g. GRCh38");
  command->add_option("--missing-tokens", arguments.missing_tokens,
                      "Comma-separated tokens read as missing (default: NA,na,NaN,.)");
  command->add_flag("--quiet", arguments.quiet, "Print nothing but errors (no progress display)");
  command->add_option("--binary-score", arguments.binary_score,
                      "p-value of the binary score test: spa (saddlepoint approximation) or plain (normal)")
      ->capture_default_str();
  command->add_option("--penalized-refit", arguments.penalized_refit,
                      "Firth refits of binary hits: auto (separation, no convergence or minor allele count < 40), "
                      "always or never")
      ->capture_default_str();
  command->add_option("--variants", arguments.variant_list,
                      "File of variants to take, one per line: an ID, or chr:pos:ref:alt (also matched as an ID)");
  command->add_option("--maf-floor", arguments.floors.minor_allele_frequency,
                      "Keep variants whose minor allele frequency is at least this");
  command->add_option("--mac-floor", arguments.floors.minor_allele_count,
                      "Keep variants whose minor allele count is at least this");
  command->add_option("--info-floor", arguments.floors.info, "Keep variants whose dosage r^2 (info) is at least this");
  command->add_option("--call-rate-floor", arguments.floors.call_rate,
                      "Keep variants whose call rate is at least this");
  command->add_option("--hwe-floor", arguments.floors.hwe_p,
                      "Keep variants whose Hardy-Weinberg exact-test p is at least this");
  command->add_option("--keep-samples", arguments.keep_samples, "Analyse only the sample IDs in this file");
  command->add_option("--relatedness", arguments.relatedness,
                      "Relatedness matrix of the samples (one file, or every part of one): quantitative traits get "
                      "a linear mixed null model");
  command->add_option("--drop-samples", arguments.drop_samples, "Leave out the sample IDs in this file");
  command->add_option("--condition-on", arguments.condition_on,
                      "Variant (ID or chr:pos:ref:alt) whose dosages join every trait's covariates (repeatable)");
  command->add_option("--conditioning-variants", arguments.condition_list,
                      "File of variants to condition on, one per line (as --condition-on)");
  command->add_option("--interaction-with", arguments.interaction_with,
                      "Test each variant's interaction with this covariate (numeric, or text with its levels), "
                      "its main effect in the null model; adds main-effect and joint-test columns");
  command->add_option("--robust-errors", arguments.robust_errors,
                      "Variance of the interaction tests: hc0 (sandwich), hc3 (small-sample sandwich) or off")
      ->capture_default_str();
  command->add_option("--rank-normalize", arguments.rank_normalize,
                      "Quantitative trait to give a rank-based inverse normal transform (repeatable)");
  command->add_option("--haploid-dosage", arguments.haploid_dosage,
                      "Dosage of a haploid ALT call from GT: 1 (default) or 2")
      ->capture_default_str();
}

void add_set_options(CLI::App* command, ScanArguments& arguments) {
  command->add_option("--sets", arguments.sets,
                      "Variant sets to test together: a BED file (set name in column 4) or a list "
                      "(set, variant as ID or chr:pos:ref:alt, optional weight); writes PREFIX.TRAIT.sets.tsv.gz");
  command->add_option("--set-maf-ceiling", arguments.set_maf_ceiling,
                      "Set tests take variants whose minor allele frequency is at most this")
      ->capture_default_str();
  command->add_option("--set-weights", arguments.set_weights,
                      "beta (Beta(1,25) density of the frequency), flat, or listed (the set file's third column)")
      ->capture_default_str();
  command->add_option("--set-collapse-mac", arguments.set_collapse_mac,
                      "Sum a set's variants with a minor allele count at most this into one (0: off; 10 is usual)")
      ->capture_default_str();
  command->add_option("--set-exact-below", arguments.set_exact_below,
                      "Sets are screened with saddlepoint tails and tested again with exact ones when a p-value "
                      "falls below this (1: every set exactly)")
      ->capture_default_str();
  command->add_option("--set-max-variants", arguments.set_max_variants,
                      "Skip, with a warning, sets with more variants than this")
      ->capture_default_str();
}

void add_scan_command(CLI::App& app, ScanArguments& arguments) {
  CLI::App* scan = app.add_subcommand("scan", "Test every variant against one or more traits");
  add_analysis_options(scan, arguments);
  scan->add_option("--confirm-below", arguments.confirm_below,
                   "Refit variants whose score p-value is below this (0: none, 1: all)")
      ->capture_default_str();
  scan->add_flag("--resume", arguments.resume,
                 "Continue an interrupted run of the same command from its last checkpoint");
  scan->add_option("--shard", arguments.shard,
                   "K/N: scan the K-th of N contiguous parts of the genome, sized from the index");
  scan->add_option("--region", arguments.regions, "CHR[:FROM-TO]: scan only records there (repeatable)");
  scan->add_option("--checkpoint-blocks", arguments.checkpoint_blocks,
                   "Blocks of 128 records between checkpoints that --resume can continue from")
      ->capture_default_str();
  add_set_options(scan, arguments);
}

void add_confirm_command(CLI::App& app, ScanArguments& arguments) {
  CLI::App* confirm = app.add_subcommand(
      "confirm", "Refit chosen variants with the full Wald, likelihood-ratio and Firth machinery");
  add_analysis_options(confirm, arguments);
  confirm->add_option("--from-results", arguments.from_results,
                      "Results files of an earlier scan whose rows below --below are refitted");
  confirm->add_option("--below", arguments.below, "Take rows of --from-results with p below this")
      ->capture_default_str();
  // With set results in --from-results, --sets tests the chosen sets again.
  add_set_options(confirm, arguments);
}

void add_simulate_command(CLI::App& app, SimulationOptions& options) {
  CLI::App* simulate = app.add_subcommand("simulate", "Write a synthetic cohort for demos and tests");
  simulate->add_option("--out", options.out_prefix, "Output prefix")->required();
  simulate->add_option("--seed", options.seed, "Random seed")->capture_default_str();
  simulate->add_option("--samples", options.samples, "Number of people")->capture_default_str();
  simulate->add_option("--variants", options.variants, "Number of VCF records")->capture_default_str();
  simulate->add_option("--chromosomes", options.chromosomes, "Number of chromosomes")->capture_default_str();
  simulate->add_option("--prevalence", options.prevalence, "Share of cases for winter_wheeze")->capture_default_str();
  simulate->add_option("--missing-rate", options.missing_rate, "Share of missing genotypes and table values")
      ->capture_default_str();
  simulate->add_option("--rare-fraction", options.rare_fraction, "Share of variants with frequency below 1%")
      ->capture_default_str();
  simulate->add_option("--causal", options.causal_per_trait, "Planted variants per trait (0: a null cohort)")
      ->capture_default_str();
  simulate->add_option("--families", options.family_share,
                       "Share of samples in families of 2 to 6 (parents, children, siblings, half-siblings, "
                       "cousins), from 0 to 1; their pedigree goes to PREFIX.families.tsv")
      ->capture_default_str();
  simulate->add_option("--heritability", options.heritability,
                       "h² of a polygenic component of both traits, shared by relatives, in [0, 1)")
      ->capture_default_str();
  simulate->add_option("--causal-genes", options.causal_genes,
                       "Genes of PREFIX.genes.bed whose rare variants (about half of them) carry effects on both "
                       "traits; they are named in the truth file's gene column")
      ->capture_default_str();
  simulate->add_option("--haplotype-blocks", options.haplotype_block_variants,
                       "Mean number of variants per haplotype block (linkage disequilibrium within blocks; "
                       "PREFIX.blocks.bed); 0 keeps the weaker linkage of earlier versions")
      ->capture_default_str();
  simulate->add_option("--locus-signals", options.locus_signals,
                       "With --haplotype-blocks: 1 to 3 causal variants of fev1_litres in partial LD "
                       "(r² about 0.3) at the locus of its first planted variant")
      ->capture_default_str();
}

struct ReportArguments {
  ReportOptions options;
  double locus_radius_kb = 500.0;
  std::string dosage_from = "auto";
  std::string covariates;
  std::string missing_tokens;
};

void add_report_command(CLI::App& app, ReportArguments& arguments) {
  CLI::App* report = app.add_subcommand("report", "Plots, inflation, lead loci and an HTML page from results files");
  ReportOptions& options = arguments.options;
  report->add_option("--results", options.results,
                     "Results files PREFIX.TRAIT.tsv.gz, one per trait. A trait's set results "
                     "PREFIX.TRAIT.sets.tsv.gz (scan --sets) are found beside its file and reported with it "
                     "(set plots and a table of the top sets); set files listed here too are matched to "
                     "their trait's file")
      ->required();
  report->add_option("--out", options.out_prefix, "Output prefix")->required();
  report->add_option("--lead-below", options.lead_threshold, "A lead locus needs p below this")->capture_default_str();
  report->add_option("--locus-radius-kb", arguments.locus_radius_kb,
                     "Kilobases either side of a lead that belong to its locus")
      ->capture_default_str();
  report->add_option("--label-top", options.label_limit, "Lead loci named on each Manhattan plot")
      ->capture_default_str();
  report->add_option("--page-loci", options.page_loci_limit, "Lead loci listed per trait on the HTML page")
      ->capture_default_str();
  report->add_option("--top-sets", options.top_sets,
                     "Variant sets of smallest overall p listed per trait (OUT.top_sets.tsv and the page)")
      ->capture_default_str();
  RegionalPlotOptions& regional = options.regional;
  report->add_option("--genotypes", regional.genotype_paths,
                     "The scan's genotype files, indexed (.tbi/.csi): each lead locus then gets a regional plot, "
                     "its variants coloured by LD r^2 with the lead on the trait's analysis samples")
      ->expected(1, -1);
  report->add_option("--traits", regional.traits_path, "With --genotypes: the scan's trait and covariate table");
  report->add_option("--sample-column", regional.table.sample_column, "Sample ID column (default: the first)");
  report->add_option("--missing-tokens", arguments.missing_tokens,
                     "Comma-separated tokens that mean missing in the table (as given to the scan)");
  report->add_option("--covariates", arguments.covariates,
                     "The scan's covariates, comma-separated (default: those each results file's sidecar lists)");
  report->add_option("--keep-samples", regional.keep_samples_path, "The scan's --keep-samples list");
  report->add_option("--drop-samples", regional.drop_samples_path, "The scan's --drop-samples list");
  report->add_option("--dosage-from", arguments.dosage_from, "auto, DS, GP or GT (as given to the scan)")
      ->capture_default_str();
  report->add_option("--haploid-dosage", regional.haploid_dosage, "1 or 2 (as given to the scan)")
      ->capture_default_str();
  report->add_option("--regional-plots", regional.plots_per_trait,
                     "Lead loci per trait given a regional plot, most significant first")
      ->capture_default_str();
  report->add_option("--signals-from", regional.signals_prefix,
                     "The --out prefix of tamis signals: marks other signals' leads and credible-set members "
                     "(PREFIX.TRAIT.signals.tsv, PREFIX.TRAIT.credible.tsv) on the regional plots");
}

void check_regional_options(ReportArguments& arguments) {
  RegionalPlotOptions& regional = arguments.options.regional;
  for (const std::string& path : regional.genotype_paths) check_readable("--genotypes", path);
  if (!regional.traits_path.empty()) check_readable("--traits", regional.traits_path);
  if (!regional.keep_samples_path.empty()) check_readable("--keep-samples", regional.keep_samples_path);
  if (!regional.drop_samples_path.empty()) check_readable("--drop-samples", regional.drop_samples_path);
  regional.dosage_field = parse_dosage_field(arguments.dosage_from);
  if (regional.haploid_dosage != 1 && regional.haploid_dosage != 2) {
    refuse_option("--haploid-dosage", "must be 1 or 2", "1 counts a haploid ALT call as one copy, 2 as two");
  }
  if (!arguments.covariates.empty()) regional.covariates = split_list(arguments.covariates);
  if (!arguments.missing_tokens.empty()) {
    regional.table.missing_tokens = split_list(arguments.missing_tokens);
    regional.table.missing_tokens.push_back("");
  }
  if (regional.genotype_paths.empty() && (!regional.traits_path.empty() || !regional.signals_prefix.empty())) {
    refuse_option(regional.signals_prefix.empty() ? "--traits" : "--signals-from",
                  "is for the regional plots, which need --genotypes",
                  "give the genotype files the scan read, or leave the option out");
  }
}

int execute_report(ReportArguments arguments) {
  if (!(arguments.locus_radius_kb >= 0.0)) {
    refuse_option("--locus-radius-kb", "must be zero or more", "the default is 500");
  }
  arguments.options.locus_radius = static_cast<std::int64_t>(std::llround(arguments.locus_radius_kb * 1000.0));
  for (const std::string& path : arguments.options.results) check_readable("--results", path);
  check_regional_options(arguments);
  const ReportSummary summary = run_report(arguments.options);
  for (const TraitReport& trait : summary.traits) {
    std::fprintf(stderr, "%s: %zu variants, lambda_gc %.4f, %zu lead loci\n", trait.trait.c_str(), trait.n_variants,
                 trait.lambda_gc, trait.n_lead_loci);
    if (!trait.sets_path.empty()) {
      std::fprintf(stderr, "%s: %zu variant sets, lambda of overall p %.4f\n", trait.trait.c_str(), trait.n_sets,
                   trait.set_lambda);
    }
    if (trait.regional_plots > 0) std::fprintf(stderr, "%s: %zu regional plots\n", trait.trait.c_str(), trait.regional_plots);
  }
  for (const std::string& path : summary.written_files) std::fprintf(stderr, "wrote %s\n", path.c_str());
  return 0;
}

void add_merge_command(CLI::App& app, MergeOptions& options) {
  CLI::App* merge = app.add_subcommand("merge", "Join the parts of a sharded scan");
  merge->add_option("--out", options.out_prefix, "Output prefix of the merged results")->required();
  merge->add_option("parts", options.part_prefixes, "The --out prefix of every shard")->required();
}

int execute_merge(const MergeOptions& options) {
  check_output_prefix_writable(options.out_prefix);
  RunLog& log = current_log();
  log.open(options.out_prefix + ".log");
  const MergeSummary summary = merge_shards(options);
  for (const std::string& path : summary.result_files) log.line("results: " + path);
  return 0;
}

// confirm is a scan of the chosen variants only, each one refitted.
ScanOptions check_confirm_options(const ScanArguments& arguments, const std::string& command_line) {
  ScanOptions options = check_scan_options(arguments, command_line);
  if (arguments.from_results.empty() && arguments.variant_list.empty()) {
    refuse_option("tamis confirm", "nothing to confirm", "give --from-results FILE (with --below P) or --variants FILE");
  }
  if (!(arguments.below > 0.0 && arguments.below <= 1.0)) {
    refuse_option("--below", "must be a p-value in (0, 1]", "for example --below 1e-5");
  }
  std::vector<GenomicRegion> positions = options.regions;
  const bool indexed = arguments.variant_list.empty() || !options.regions.empty();
  std::set<std::string> chosen_sets;
  for (const std::string& path : arguments.from_results) {
    check_readable("--from-results", path);
    if (is_set_results_path(path)) {
      select_sets_from_results(path, arguments.below, chosen_sets, positions);
    } else {
      select_from_results(path, arguments.below, options.selection, positions);
    }
  }
  if (!chosen_sets.empty() && options.selection.active()) {
    refuse_option("--from-results", "set results and variant results cannot be confirmed in one run",
                  "confirm the set results and the variant results in two runs");
  }
  // Set hits: every variant in their extents is refitted, and with --sets the
  // sets themselves are tested again.
  if (options.sets.active() && chosen_sets.empty()) {
    refuse_option("--sets", "confirm tests sets again only for set results (PREFIX.TRAIT.sets.tsv.gz)",
                  "give set results to --from-results, or leave out --sets");
  }
  options.sets.only_sets = chosen_sets;
  options.regions = indexed ? positions : std::vector<GenomicRegion>{};
  if (!options.selection.active() && chosen_sets.empty()) {
    refuse_option("--from-results", "no row has p below " + std::to_string(arguments.below), "raise --below");
  }
  options.confirm_below = 1.0;
  return options;
}

struct SignalArguments {
  ScanArguments analysis;
  std::string loci;
  double select_below = 5e-8;
  double window_kb = 500.0;
  std::size_t max_signals = 10;
  double prior_effect_sd = 0.0;
};

void add_signals_command(CLI::App& app, SignalArguments& arguments) {
  CLI::App* command = app.add_subcommand(
      "signals", "Independent signals at lead loci (stepwise conditional selection, joint fit) and credible sets");
  add_analysis_options(command, arguments.analysis);
  command->add_option("--loci", arguments.loci, "The loci file of `tamis report` (PREFIX.loci.tsv)");
  command->add_option("--region", arguments.analysis.regions,
                      "CHR:FROM-TO: follow up this stretch for every trait (repeatable), instead of --loci");
  command->add_option("--select-below", arguments.select_below,
                      "A further signal needs its conditional p-value below this")
      ->capture_default_str();
  command->add_option("--window-kb", arguments.window_kb,
                      "Kilobases either side of a lead that are tested (a locus' span is always covered)")
      ->capture_default_str();
  command->add_option("--max-signals", arguments.max_signals, "Most signals selected per locus")->capture_default_str();
  command->add_option("--prior-effect-sd", arguments.prior_effect_sd,
                      "Prior SD of a causal effect in the Bayes factors (default: 0.2 log odds for binary traits, "
                      "0.15 trait SDs for quantitative ones)");
}

SignalOptions check_signal_options(const SignalArguments& arguments, const std::string& command_line) {
  SignalOptions options;
  ScanArguments analysis = arguments.analysis;
  analysis.regions.clear();  // windows, not the scan's regions
  options.scan = check_scan_options(analysis, command_line);
  if (arguments.loci.empty() == arguments.analysis.regions.empty()) {
    refuse_option("tamis signals", "give either --loci or --region", "--loci takes the loci file of `tamis report`");
  }
  if (!arguments.analysis.variant_list.empty()) {
    refuse_option("--variants", "signals tests every variant of each window", "leave --variants out");
  }
  if (!arguments.analysis.interaction_with.empty()) {
    refuse_option("--interaction-with", "signals selects main effects, not interactions",
                  "run `tamis scan --interaction-with` for interaction tests");
  }
  if (arguments.analysis.floors.info > 0.0 || arguments.analysis.floors.hwe_p > 0.0) {
    refuse_option(arguments.analysis.floors.info > 0.0 ? "--info-floor" : "--hwe-floor",
                  "signals applies the minor allele frequency, minor allele count and call rate floors only",
                  "leave the option out, or filter the genotype files first");
  }
  if (!arguments.loci.empty()) check_readable("--loci", arguments.loci);
  options.loci_path = arguments.loci;
  for (const std::string& text : arguments.analysis.regions) parse_region(text);
  options.region_texts = arguments.analysis.regions;
  if (!(arguments.select_below > 0.0 && arguments.select_below < 1.0)) {
    refuse_option("--select-below", "must be a p-value in (0, 1)", "the default, 5e-8, is the genome-wide level");
  }
  options.select_below = arguments.select_below;
  if (!(arguments.window_kb >= 0.0 && arguments.window_kb <= 1e6)) {
    refuse_option("--window-kb", "must be between 0 and 1,000,000 kilobases", "the default is 500");
  }
  options.window_radius = static_cast<std::int64_t>(std::llround(arguments.window_kb * 1000.0));
  if (arguments.max_signals < 1) refuse_option("--max-signals", "must be at least 1", "the default is 10");
  options.max_signals = arguments.max_signals;
  if (!(arguments.prior_effect_sd >= 0.0 && std::isfinite(arguments.prior_effect_sd))) {
    refuse_option("--prior-effect-sd", "must be a positive SD", "leave it out for the default");
  }
  options.prior_effect_sd = arguments.prior_effect_sd;
  return options;
}

int execute_signals(const SignalArguments& arguments, const std::string& command_line) {
  const SignalOptions options = check_signal_options(arguments, command_line);
  RunLog& log = current_log();
  log.set_echo(!arguments.analysis.quiet);
  log.open(options.scan.out_prefix + ".log");
  try {
    const SignalsSummary summary = run_signals(options);
    log.line(std::to_string(summary.signals) + " signals at " + std::to_string(summary.loci) + " loci");
    for (const std::string& path : summary.files) log.line("wrote " + path);
  } catch (const Error& error) {
    log.detail(std::string("error: ") + error.what());
    throw;
  }
  return 0;
}

// For tests only: TAMIS_TEST_SIGNAL_AFTER_BLOCK=K:TERM (or K:KILL, K:INT)
// makes the scan send itself that signal once K blocks are written, so that
// an interrupted run is the same on a fast machine and a slow one.
void install_test_interruption(ScanOptions& options) {
  const char* request = std::getenv("TAMIS_TEST_SIGNAL_AFTER_BLOCK");
  if (!request) return;
  const std::string text = request;
  const std::size_t colon = text.find(':');
  const std::string name = colon == std::string::npos ? "" : text.substr(colon + 1);
  const int signal_number = name == "KILL" ? SIGKILL : name == "TERM" ? SIGTERM : name == "INT" ? SIGINT : 0;
  const unsigned long long block = std::strtoull(text.c_str(), nullptr, 10);
  if (signal_number == 0 || block == 0) {
    refuse_option("TAMIS_TEST_SIGNAL_AFTER_BLOCK", "'" + text + "' is not BLOCK:KILL, BLOCK:TERM or BLOCK:INT", "");
  }
  options.after_block = [block, signal_number](std::uint64_t blocks_written) {
    if (blocks_written == block) raise(signal_number);
  };
}

int execute_scan(const ScanArguments& arguments, const std::string& command_line, bool confirm) {
  ScanOptions options = confirm ? check_confirm_options(arguments, command_line)
                                : check_scan_options(arguments, command_line);
  install_test_interruption(options);
  RunLog& log = current_log();
  log.set_echo(!arguments.quiet);
  log.open(options.out_prefix + ".log");
  try {
    const ScanSummary summary = run_scan(options);
    for (const std::string& path : summary.result_files) log.line("results: " + path);
    for (const std::string& path : summary.set_files) log.line("set results: " + path);
    log.line("log: " + log.path());
  } catch (const Error& error) {
    log.detail(std::string("error: ") + error.what());
    throw;
  }
  return 0;
}

int execute_simulate(const SimulationOptions& options) {
  const SimulationOutputs outputs = simulate_cohort(options);
  std::fprintf(stderr, "genotypes: %s\ntraits: %s\nplanted effects: %s\n", outputs.vcf_path.c_str(),
               outputs.table_path.c_str(), outputs.truth_path.c_str());
  if (!outputs.families_path.empty()) std::fprintf(stderr, "families: %s\n", outputs.families_path.c_str());
  std::fprintf(stderr, "genes: %s\n", outputs.genes_path.c_str());
  if (!outputs.blocks_path.empty()) std::fprintf(stderr, "haplotype blocks: %s\n", outputs.blocks_path.c_str());
  return 0;
}

// Raw options of `tamis relatedness`; checked by check_relatedness_options.
struct RelatednessArguments {
  std::vector<std::string> genotypes;
  std::vector<std::string> regions;
  std::string variant_list;
  std::string keep_samples;
  std::string drop_samples;
  std::string dosage_from = "auto";
  int haploid_dosage = 1;
  QcFloors floors = RelatednessOptions{}.floors;
  double thin_kb = 0.0;
  double keep_above = RelatednessOptions{}.keep_above;
  std::string part;
  int threads = 0;
  std::string out;
  bool quiet = false;
};

void add_relatedness_command(CLI::App& app, RelatednessArguments& arguments) {
  CLI::App* command = app.add_subcommand(
      "relatedness", "Genomic relationship matrix of the genotype samples, for scan --relatedness");
  command->add_option("--genotypes", arguments.genotypes, "VCF, VCF.gz or BCF files, read in the order given")
      ->required();
  command->add_option("--out", arguments.out, "Output prefix: PREFIX.relatedness.tsv.gz and PREFIX.log")->required();
  command->add_option("--region", arguments.regions, "CHR[:FROM-TO]: take markers only there (repeatable)");
  command->add_option("--variants", arguments.variant_list,
                      "File of variants to take as markers, one per line: an ID or chr:pos:ref:alt");
  command->add_option("--keep-samples", arguments.keep_samples, "Take only the sample IDs in this file");
  command->add_option("--drop-samples", arguments.drop_samples, "Leave out the sample IDs in this file");
  command->add_option("--dosage-from", arguments.dosage_from, "auto, DS, GP or GT")->capture_default_str();
  command->add_option("--haploid-dosage", arguments.haploid_dosage,
                      "Dosage of a haploid ALT call from GT: 1 (default) or 2")
      ->capture_default_str();
  command->add_option("--maf-floor", arguments.floors.minor_allele_frequency,
                      "Take markers whose minor allele frequency is at least this")
      ->capture_default_str();
  command->add_option("--mac-floor", arguments.floors.minor_allele_count,
                      "Take markers whose minor allele count is at least this");
  command->add_option("--info-floor", arguments.floors.info, "Take markers whose dosage r^2 (info) is at least this");
  command->add_option("--call-rate-floor", arguments.floors.call_rate, "Take markers whose call rate is at least this")
      ->capture_default_str();
  command->add_option("--hwe-floor", arguments.floors.hwe_p,
                      "Take markers whose Hardy-Weinberg exact-test p is at least this");
  command->add_option("--thin-kb", arguments.thin_kb,
                      "Take markers at least this many kilobases apart on a contig (0: every marker)")
      ->capture_default_str();
  command->add_option("--keep-above", arguments.keep_above,
                      "Write the pairs whose relatedness is at least this (every diagonal is written)")
      ->capture_default_str();
  command->add_option("--part", arguments.part,
                      "K/N: compute the K-th of N near-equal shares of the sample pairs "
                      "(PREFIX.relatedness.partK-of-N.tsv.gz)");
  command->add_option("--threads", arguments.threads, "Worker threads (default: every core)");
  command->add_flag("--quiet", arguments.quiet, "Print nothing but errors (no progress display)");
}

RelatednessOptions check_relatedness_options(const RelatednessArguments& arguments, const std::string& command_line) {
  RelatednessOptions options;
  check_output_prefix_writable(arguments.out);
  options.out_prefix = arguments.out;
  for (const std::string& path : arguments.genotypes) check_readable("--genotypes", path);
  options.genotype_paths = arguments.genotypes;
  options.dosage_field = parse_dosage_field(arguments.dosage_from);
  if (arguments.haploid_dosage != 1 && arguments.haploid_dosage != 2) {
    refuse_option("--haploid-dosage", "must be 1 or 2", "1 counts a haploid ALT call as one copy, 2 as two");
  }
  options.haploid_dosage = arguments.haploid_dosage;
  check_floors(arguments.floors);
  options.floors = arguments.floors;
  if (!(arguments.thin_kb >= 0.0 && std::isfinite(arguments.thin_kb))) {
    refuse_option("--thin-kb", "must be zero or more kilobases", "for example --thin-kb 50");
  }
  options.thin_kb = arguments.thin_kb;
  if (!std::isfinite(arguments.keep_above)) {
    refuse_option("--keep-above", "must be a finite number", "the default, 0.05, keeps relatives to about the third degree");
  }
  options.keep_above = arguments.keep_above;
  if (!arguments.part.empty()) std::tie(options.part, options.part_count) = parse_part_of("--part", arguments.part);
  options.threads = thread_count_from(arguments.threads);
  if (!arguments.keep_samples.empty()) check_readable("--keep-samples", arguments.keep_samples);
  if (!arguments.drop_samples.empty()) check_readable("--drop-samples", arguments.drop_samples);
  options.keep_samples_path = arguments.keep_samples;
  options.drop_samples_path = arguments.drop_samples;
  for (const std::string& text : arguments.regions) options.regions.push_back(parse_region(text));
  if (!arguments.variant_list.empty()) {
    check_readable("--variants", arguments.variant_list);
    std::vector<GenomicRegion> positions;
    const bool indexed = select_from_list(arguments.variant_list, ChromosomeCodes::ssf, options.selection, positions);
    if (indexed && options.regions.empty()) options.regions = positions;
  }
  options.command_line = command_line;
  options.quiet = arguments.quiet;
  return options;
}

int execute_relatedness(const RelatednessArguments& arguments, const std::string& command_line) {
  const RelatednessOptions options = check_relatedness_options(arguments, command_line);
  RunLog& log = current_log();
  log.set_echo(!arguments.quiet);
  log.open(relatedness_log_path(options.out_prefix, options.part, options.part_count));
  try {
    const RelatednessSummary summary = run_relatedness(options);
    log.line("relatedness: " + summary.data_path);
    log.line("log: " + log.path());
  } catch (const Error& error) {
    log.detail(std::string("error: ") + error.what());
    throw;
  }
  return 0;
}

extern "C" void remove_temporaries_and_exit(int signal_number) {
  remove_registered_temporaries();
  const char message[] =
      "tamis: interrupted; no results were written under their final names "
      "(a scan can continue with --resume)\n";
  ssize_t ignored = write(STDERR_FILENO, message, sizeof message - 1);
  (void)ignored;
  _exit(signal_number == SIGINT ? static_cast<int>(ExitCode::interrupted) : 128 + signal_number);
}

void install_signal_handlers() {
  struct sigaction action {};
  action.sa_handler = remove_temporaries_and_exit;
  sigemptyset(&action.sa_mask);
  for (int signal_number : {SIGINT, SIGTERM, SIGHUP}) sigaction(signal_number, &action, nullptr);
  // A file-size limit then fails the write (EFBIG), which is reported as an
  // output error, instead of killing the process.
  signal(SIGXFSZ, SIG_IGN);
}

}  // namespace

int run_command_line(int argc, char** argv) {
  install_signal_handlers();
  CLI::App app("tamis: genome-wide association scans with score screening and likelihood confirmation", "tamis");
  app.set_version_flag("--version", std::string("tamis ") + TAMIS_VERSION);
  app.require_subcommand(1);
  ScanArguments scan_arguments;
  ScanArguments confirm_arguments;
  SimulationOptions simulation_options;
  add_scan_command(app, scan_arguments);
  add_confirm_command(app, confirm_arguments);
  add_simulate_command(app, simulation_options);
  ReportArguments report_arguments;
  add_report_command(app, report_arguments);
  MergeOptions merge_options;
  add_merge_command(app, merge_options);
  RelatednessArguments relatedness_arguments;
  add_relatedness_command(app, relatedness_arguments);
  SignalArguments signal_arguments;
  add_signals_command(app, signal_arguments);
  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& error) {
    const int code = app.exit(error);
    return code == 0 ? 0 : static_cast<int>(ExitCode::usage);
  }
  try {
    if (app.got_subcommand("scan")) return execute_scan(scan_arguments, join_command_line(argc, argv), false);
    if (app.got_subcommand("confirm")) return execute_scan(confirm_arguments, join_command_line(argc, argv), true);
    if (app.got_subcommand("report")) return execute_report(report_arguments);
    if (app.got_subcommand("signals")) return execute_signals(signal_arguments, join_command_line(argc, argv));
    if (app.got_subcommand("merge")) return execute_merge(merge_options);
    if (app.got_subcommand("relatedness")) return execute_relatedness(relatedness_arguments, join_command_line(argc, argv));
    return execute_simulate(simulation_options);
  } catch (const Error& error) {
    std::fprintf(stderr, "tamis: error: %s\n", error.what());
    return static_cast<int>(error.code());
  } catch (const std::exception& error) {
    std::fprintf(stderr, "tamis: internal error: %s\n  this is a bug in tamis; please report it with the command line\n",
                 error.what());
    return static_cast<int>(ExitCode::internal);
  }
}

}  // namespace tamis
