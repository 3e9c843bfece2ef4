#include "scan/related_samples.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <unordered_map>
#include <utility>

#include "tamis/errors.hpp"
#include "tamis/logistic_mixed_model.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

// Families rarely link more samples than this; a larger group is worth a
// word in the log (it is also slower to factor).
constexpr std::size_t kLargeRelatedGroup = 1000;

std::string format_number(double value) {
  char text[64];
  std::snprintf(text, sizeof text, "%.6g", value);
  return text;
}

std::string first_ids(const std::vector<std::string>& ids, std::size_t shown) {
  std::string text;
  for (std::size_t id_idx = 0; id_idx < ids.size() && id_idx < shown; ++id_idx) text += (id_idx ? ", " : "") + ids[id_idx];
  if (ids.size() > shown) text += ", ...";
  return text;
}

std::string join_paths(const std::vector<std::string>& paths) {
  std::string text;
  for (const std::string& path : paths) text += (text.empty() ? "" : ", ") + path;
  return text;
}

void log_structure(const std::string& trait, const SparseRelatedness& relatedness,
                   const std::vector<std::vector<std::uint32_t>>& components) {
  std::size_t in_families = 0, largest = 1;
  for (const auto& component : components) {
    in_families += component.size();
    largest = std::max(largest, component.size());
  }
  current_log().line("trait " + trait + ": relatedness among " + std::to_string(relatedness.sample_count) +
                     " analysis samples: " + std::to_string(relatedness.pairs.size()) + " related pairs, " +
                     std::to_string(in_families) + " samples in " + std::to_string(components.size()) +
                     " related groups (largest " + std::to_string(largest) + "), " +
                     std::to_string(relatedness.sample_count - in_families) + " with no relative");
  if (largest >= kLargeRelatedGroup) {
    current_log().line("note: trait " + trait + ": one related group holds " + std::to_string(largest) +
                       " samples; relatedness this widespread usually comes from population structure, or from "
                       "estimates on too few markers, rather than from families. A higher --keep-above in "
                       "`tamis relatedness` (0.1 keeps most cousins) keeps families apart and the fit fast");
  }
}

void log_variance_components(const std::string& trait, const MixedModel& mixed) {
  const VarianceComponents& reml = mixed.reml();
  current_log().line("null model " + trait + ": linear mixed model by REML, h^2 = " + format_number(reml.h2) +
                     ", sigma_g^2 = " + format_number(reml.sigma2_g) + ", sigma_e^2 = " +
                     format_number(reml.sigma2_e) + ", REML log-likelihood = " + format_number(reml.log_likelihood) +
                     ", " + std::to_string(reml.iterations) + " iterations");
  current_log().detail("  ML null fit: h^2 = " + format_number(mixed.null_ml().h2) +
                       ", log-likelihood = " + format_number(mixed.null_ml().log_likelihood));
  if (reml.at_boundary && reml.h2 <= 0.0) {
    current_log().line("note: trait " + trait + ": the REML estimate of h^2 is 0 (no polygenic variance); "
                       "the mixed model is then the plain linear model, and the scan goes on");
  } else if (reml.at_boundary) {
    current_log().line("note: trait " + trait + ": the REML estimate of h^2 sits at the largest value the "
                       "relatedness matrix admits (" + format_number(reml.h2) + ")");
  }
}

// Whitening mixes the rows of a family, so a missing dosage must hold its
// imputed value before, not after: the kernel's own list cannot serve.
void impute_into(const GatheredBlock& gathered, std::size_t width, const double* fills, std::vector<double>& scratch) {
  scratch.assign(gathered.genotypes.begin(), gathered.genotypes.end());
  for (std::size_t site_idx = 0; site_idx < width; ++site_idx) {
    for (std::size_t entry = gathered.missing_starts[site_idx]; entry < gathered.missing_starts[site_idx + 1];
         ++entry) {
      scratch[gathered.missing_rows[entry] * width + site_idx] = fills[site_idx];
    }
  }
}

// A mixed model's part in common: the kernel reads the block with its
// missing dosages imputed, then whitened by the model.
template <typename Model>
class WhitenedBlocks : public TraitModel {
 public:
  WhitenedBlocks(const Model& mixed, std::vector<std::size_t> row_of_sample)
      : mixed_(mixed), row_of_sample_(std::move(row_of_sample)) {}

  KernelInput prepare_block(const GatheredBlock& gathered, std::size_t width, const double* fills,
                            const ImputedDosages&, std::vector<double>& scratch) const override {
    impute_into(gathered, width, fills, scratch);
    mixed_.whiten_block(scratch.data(), width, row_of_sample_);
    return {scratch.data(), nullptr};
  }

 protected:
  const Model& mixed_;
  std::vector<std::size_t> row_of_sample_;
};

class MixedLinearModel : public WhitenedBlocks<MixedModel> {
 public:
  using WhitenedBlocks::WhitenedBlocks;

  Confirmation confirm(const Eigen::VectorXd& genotype, double) const override {
    Confirmation confirmation;
    confirmation.result = mixed_.confirm(genotype);
    return confirmation;
  }
};

// The logistic mixed model's part: the kernel reads the block whitened by
// the working covariance; the saddlepoint's Bernoulli variance (given b-hat)
// is matched to the score's variance under the model; hits are refitted by
// Laplace likelihoods, and where that refit fails (a separated rare
// variant; Firth's penalty has no mixed-model form here) the score test's
// saddlepoint p-value stays the primary one.
class MixedLogisticModel : public WhitenedBlocks<LogisticMixedModel> {
 public:
  using WhitenedBlocks::WhitenedBlocks;

  Confirmation confirm(const Eigen::VectorXd& genotype, double) const override {
    Confirmation confirmation;
    confirmation.result = mixed_.confirm(genotype);
    confirmation.keeps_score = !confirmation.result.converged;
    return confirmation;
  }

  double saddlepoint_variance(const SaddlepointContext& context, const Eigen::VectorXd& genotype,
                              const ScoreResult&) const override {
    return context.bernoulli_variance(genotype);
  }
};

}  // namespace

std::unique_ptr<TraitModel> make_mixed_model(const TraitContext& trait, std::vector<std::size_t> row_of_sample) {
  if (trait.logistic_mixed) return std::make_unique<MixedLogisticModel>(*trait.logistic_mixed, std::move(row_of_sample));
  return std::make_unique<MixedLinearModel>(*trait.mixed, std::move(row_of_sample));
}

ScanRelatedness load_scan_relatedness(const std::vector<std::string>& paths,
                                      const std::vector<std::string>& genotype_samples) {
  ScanRelatedness relatedness;
  relatedness.paths = paths;
  relatedness.matrix = read_relatedness_files(paths);
  std::unordered_map<std::string, std::int64_t> index_of_id;
  for (std::size_t id_idx = 0; id_idx < relatedness.matrix.sample_ids.size(); ++id_idx) {
    index_of_id.emplace(relatedness.matrix.sample_ids[id_idx], static_cast<std::int64_t>(id_idx));
  }
  relatedness.matrix_index_of_sample.assign(genotype_samples.size(), -1);
  std::vector<bool> matched(relatedness.matrix.sample_ids.size(), false);
  std::vector<std::string> without_entry;
  for (std::size_t sample_idx = 0; sample_idx < genotype_samples.size(); ++sample_idx) {
    auto found = index_of_id.find(genotype_samples[sample_idx]);
    if (found == index_of_id.end()) {
      without_entry.push_back(genotype_samples[sample_idx]);
      continue;
    }
    relatedness.matrix_index_of_sample[sample_idx] = found->second;
    matched[static_cast<std::size_t>(found->second)] = true;
  }
  std::vector<std::string> unknown;
  for (std::size_t id_idx = 0; id_idx < matched.size(); ++id_idx) {
    if (!matched[id_idx]) unknown.push_back(relatedness.matrix.sample_ids[id_idx]);
  }
  RunLog& log = current_log();
  log.line("relatedness: " + join_paths(paths) + ": " + std::to_string(relatedness.matrix.sample_ids.size()) +
           " samples, " + std::to_string(relatedness.matrix.pairs.size()) + " related pairs");
  if (!unknown.empty()) {
    log.line("note: " + std::to_string(unknown.size()) + " sample IDs of the relatedness matrix are not in the "
             "genotype files and are ignored (" + first_ids(unknown, 5) + ")");
  }
  if (!without_entry.empty()) {
    log.line("note: " + std::to_string(without_entry.size()) + " genotype samples have no entry in the "
             "relatedness matrix and count as unrelated to everyone (" + first_ids(without_entry, 5) + ")");
  }
  return relatedness;
}

SparseRelatedness relatedness_among(const ScanRelatedness& relatedness, const std::vector<std::size_t>& genotype_index) {
  const RelatednessFileContents& matrix = relatedness.matrix;
  std::vector<std::int64_t> analysis_of_entry(matrix.sample_ids.size(), -1);
  SparseRelatedness among;
  among.sample_count = genotype_index.size();
  among.diagonal.assign(genotype_index.size(), 1.0);
  for (std::size_t analysis_idx = 0; analysis_idx < genotype_index.size(); ++analysis_idx) {
    const std::int64_t entry = relatedness.matrix_index_of_sample[genotype_index[analysis_idx]];
    if (entry < 0) continue;
    analysis_of_entry[static_cast<std::size_t>(entry)] = static_cast<std::int64_t>(analysis_idx);
    const double diagonal = matrix.diagonal[static_cast<std::size_t>(entry)];
    if (!std::isnan(diagonal)) among.diagonal[analysis_idx] = diagonal;
  }
  for (const RelatednessPair& pair : matrix.pairs) {
    const std::int64_t first = analysis_of_entry[pair.first];
    const std::int64_t second = analysis_of_entry[pair.second];
    if (first < 0 || second < 0 || pair.value == 0.0) continue;
    among.pairs.push_back({static_cast<std::uint32_t>(std::min(first, second)),
                           static_cast<std::uint32_t>(std::max(first, second)), pair.value});
  }
  // A fixed order whatever the order of the files' rows.
  std::sort(among.pairs.begin(), among.pairs.end(), [](const RelatednessPair& a, const RelatednessPair& b) {
    return a.first != b.first ? a.first < b.first : a.second < b.second;
  });
  return among;
}

namespace {

// A logistic mixed model is estimable only with enough of both outcomes.
constexpr std::size_t kFewestCasesOrControls = 10;
// The logistic model's working covariance changes with W at every
// iteration, so each related group is factored afresh hundreds of times in a
// fit: beyond this size that takes hours, and such groups come from
// population structure rather than families.
constexpr std::size_t kLargestBinaryGroup = 1000;

void refuse_large_groups(const ScanRelatedness& relatedness, const TraitContext& trait,
                         const SparseRelatedness& among) {
  std::size_t largest = 0;
  for (const auto& component : related_components(among)) largest = std::max(largest, component.size());
  if (largest <= kLargestBinaryGroup) return;
  throw Error(ExitCode::model, join_paths(relatedness.paths) + ", trait " + trait.set.trait,
              "one related group holds " + std::to_string(largest) + " of the analysis samples; the logistic "
                  "mixed model of a binary trait handles groups of up to " + std::to_string(kLargestBinaryGroup) +
                  " (relatedness this widespread comes from population structure, not families)",
              "recompute the matrix with a higher --keep-above in `tamis relatedness` (0.1 keeps most cousins "
              "and keeps families apart), and adjust for structure with principal components as covariates");
}

void refuse_too_few_cases(const ScanRelatedness& relatedness, const TraitContext& trait) {
  const std::size_t cases = trait.set.case_count, controls = trait.set.control_count;
  if (cases >= kFewestCasesOrControls && controls >= kFewestCasesOrControls) return;
  throw Error(ExitCode::model, join_paths(relatedness.paths) + ", trait " + trait.set.trait,
              "the logistic mixed model needs at least " + std::to_string(kFewestCasesOrControls) +
                  " cases and " + std::to_string(kFewestCasesOrControls) + " controls among the analysis samples; "
                  "the trait has " + std::to_string(cases) + " cases and " + std::to_string(controls) + " controls",
              "scan this trait without --relatedness (the saddlepoint score test keeps a plain scan of so few "
              "cases calibrated), or widen the analysis samples");
}

// All cases in one related group: the polygenic variance and that group's
// shared risk cannot be told apart.
void warn_cases_in_one_group(const TraitContext& trait, const LogisticMixedModel& mixed) {
  for (const auto& component : mixed.components()) {
    std::size_t cases = 0;
    for (std::uint32_t sample : component) cases += trait.set.y[sample] == 1.0;
    if (cases == trait.set.case_count) {
      current_log().line("warning: trait " + trait.set.trait + ": all " + std::to_string(cases) +
                         " cases are in one related group of " + std::to_string(component.size()) +
                         " samples; tau is not identifiable and the scan's p-values rest on it. Check "
                         "--keep-above and how cases were ascertained");
      return;
    }
  }
}

void log_logistic_fit(const std::string& trait, const LogisticMixedModel& mixed) {
  const PqlSummary& pql = mixed.pql();
  current_log().line("null model " + trait + ": logistic mixed model by penalised quasi-likelihood, tau = " +
                     format_number(pql.tau) + ", " + std::to_string(pql.iterations) +
                     " iterations (converged: last change of the linear predictor " +
                     format_number(pql.last_change) + ")");
  current_log().detail("  Laplace null fit: tau = " + format_number(mixed.null_laplace().tau) +
                       ", log-likelihood = " + format_number(mixed.null_laplace().log_likelihood) +
                       (mixed.null_laplace().converged ? "" : " (not converged)") +
                       (mixed.null_laplace().tau_held ? " (tau held at the PQL estimate: the Laplace likelihood "
                                                        "has no maximum near it)" : ""));
  if (pql.tau_at_zero) {
    current_log().line("note: trait " + trait + ": the estimate of tau is 0 (no polygenic variance); the mixed "
                       "model is then the plain logistic model, and the scan goes on");
  }
}

}  // namespace

void fit_logistic_mixed_null_model(const ScanRelatedness& relatedness,
                                   const std::vector<std::string>& genotype_samples, TraitContext& trait) {
  const std::string& name = trait.set.trait;
  refuse_too_few_cases(relatedness, trait);
  const SparseRelatedness among = relatedness_among(relatedness, trait.set.genotype_index);
  refuse_large_groups(relatedness, trait, among);
  try {
    LogisticMixedOptions options;
    options.sample_label = [&](std::uint32_t analysis_idx) {
      return genotype_samples[trait.set.genotype_index[analysis_idx]];
    };
    trait.logistic_mixed = std::make_unique<LogisticMixedModel>(
        LogisticMixedModel::fit(trait.set.y, trait.model.design, among, options));
  } catch (const Error& error) {
    throw Error(error.code(), join_paths(relatedness.paths) + ", trait " + name,
                error.where().empty() ? error.problem() : error.where() + ": " + error.problem(), error.fix());
  }
  const LogisticMixedModel& mixed = *trait.logistic_mixed;
  log_structure(name, among, mixed.components());
  log_logistic_fit(name, mixed);
  warn_cases_in_one_group(trait, mixed);
  const PqlSummary& pql = mixed.pql();
  trait.null_model_summary = "logistic mixed model by penalised quasi-likelihood, tau " + format_number(pql.tau) +
                             ", " + std::to_string(pql.iterations) + " iterations, converged";
  // The kernel's model: least squares on the whitened working model with the
  // dispersion fixed at 1, so that its score is g'(y - mu-hat) and its
  // variance g'Pg.
  const NullModel plain = std::move(trait.model);
  trait.model = fit_null_model(name, TraitKind::quantitative, mixed.whiten(mixed.working_response()),
                               mixed.whiten(mixed.design()), plain.column_names);
  trait.model.sigma2 = 1.0;
  trait.model.dropped_columns = plain.dropped_columns;
}

void fit_mixed_null_model(const ScanRelatedness& relatedness, const std::vector<std::string>& genotype_samples,
                          TraitContext& trait) {
  const std::string& name = trait.set.trait;
  if (trait.set.kind == TraitKind::binary) {
    fit_logistic_mixed_null_model(relatedness, genotype_samples, trait);
    return;
  }
  const SparseRelatedness among = relatedness_among(relatedness, trait.set.genotype_index);
  try {
    MixedModelOptions options;
    options.sample_label = [&](std::uint32_t analysis_idx) {
      return genotype_samples[trait.set.genotype_index[analysis_idx]];
    };
    trait.mixed = std::make_unique<MixedModel>(MixedModel::fit(trait.set.y, trait.model.design, among, options));
  } catch (const Error& error) {
    throw Error(error.code(), join_paths(relatedness.paths) + ", trait " + name,
                error.where().empty() ? error.problem() : error.where() + ": " + error.problem(), error.fix());
  }
  log_structure(name, among, trait.mixed->components());
  log_variance_components(name, *trait.mixed);
  trait.null_model_summary = "linear mixed model by REML, h2 " + format_number(trait.mixed->reml().h2) + ", " +
                             std::to_string(trait.mixed->reml().iterations) + " iterations";
  // The plain fit has already dropped collinear columns and named them.
  const NullModel plain = std::move(trait.model);
  trait.model = fit_null_model(name, trait.set.kind, trait.mixed->whiten(trait.set.y),
                               trait.mixed->whiten(plain.design), plain.column_names);
  trait.model.dropped_columns = plain.dropped_columns;
}

}  // namespace tamis
