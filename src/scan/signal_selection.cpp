#include "scan/signal_selection.hpp"

#include <algorithm>
#include <cmath>
#include <map>

#include "scan/trait_setup.hpp"

namespace tamis {
namespace {

// Refits per step: the score ranks the candidates, and the best few by score
// are refitted, so that a rare variant whose score test runs ahead of its
// refit cannot end the selection on its own.
constexpr std::size_t kCandidatesRefitted = 3;

// Fitted models by the set of conditioned variants: the last step's model
// is also the joint fit's "all but one" model of the signal selected last.
class FitCache {
 public:
  explicit FitCache(const ConditionalFitter& fit) : fit_(fit) {}
  const TraitContext& get(std::vector<std::size_t> conditioned) {
    std::sort(conditioned.begin(), conditioned.end());
    auto found = fits_.find(conditioned);
    if (found == fits_.end()) found = fits_.emplace(conditioned, fit_(conditioned)).first;
    return *found->second;
  }

 private:
  const ConditionalFitter& fit_;
  std::map<std::vector<std::size_t>, std::unique_ptr<TraitContext>> fits_;
};

Eigen::VectorXd column_of(const WindowVariants& window, std::size_t variant) {
  return window.dosages.col(static_cast<Eigen::Index>(variant));
}

struct Candidate {
  std::size_t variant = 0;
  double log_p = 0.0;
};

// The best of the unselected variants: the top few by score, refitted.
std::optional<Candidate> best_candidate(const TraitContext& trait, const WindowVariants& window,
                                        const std::vector<std::size_t>& selected) {
  const std::vector<ScoreResult> scores = score_window(trait, window);
  std::vector<std::size_t> order;
  for (std::size_t variant = 0; variant < window.size(); ++variant) {
    const bool taken = std::find(selected.begin(), selected.end(), variant) != selected.end();
    if (!taken && scores[variant].testable) order.push_back(variant);
  }
  const std::size_t refitted = std::min(order.size(), kCandidatesRefitted);
  // Largest statistic first; ties to the earlier variant, so the choice never depends on threads.
  std::partial_sort(order.begin(), order.begin() + static_cast<std::ptrdiff_t>(refitted), order.end(),
                    [&](std::size_t a, std::size_t b) {
                      return scores[a].chisq != scores[b].chisq ? scores[a].chisq > scores[b].chisq : a < b;
                    });
  std::optional<Candidate> best;
  for (std::size_t rank = 0; rank < refitted; ++rank) {
    const std::size_t variant = order[rank];
    const Confirmation refit = trait.tests->confirm(column_of(window, variant), window.minor_allele_counts[variant]);
    const double log_p = primary_log_p(refit, scores[variant]);
    if (!best || log_p < best->log_p) best = Candidate{variant, log_p};
  }
  return best;
}

std::vector<std::size_t> all_but(const std::vector<std::size_t>& selected, std::size_t left_out) {
  std::vector<std::size_t> others;
  for (std::size_t variant : selected) {
    if (variant != left_out) others.push_back(variant);
  }
  return others;
}

CredibleSet credible_set_of(const std::vector<ScoreResult>& scores, double prior_effect_sd) {
  std::vector<CredibleEvidence> evidence(scores.size());
  for (std::size_t variant = 0; variant < scores.size(); ++variant) {
    // A variant in the covariate span (0, 0) carries no evidence.
    evidence[variant] = {scores[variant].beta, scores[variant].se};
  }
  return credible_set(evidence, prior_effect_sd);
}

}  // namespace

std::unique_ptr<TraitContext> fit_conditional(const ConditionalModelInputs& inputs, const WindowVariants& window,
                                              const std::vector<std::string>& labels,
                                              const std::vector<std::size_t>& conditioned) {
  auto trait = std::make_unique<TraitContext>();
  trait->set = *inputs.set;
  const Eigen::Index base = trait->set.design.cols();
  trait->set.design.conservativeResize(Eigen::NoChange, base + static_cast<Eigen::Index>(conditioned.size()));
  for (std::size_t column_idx = 0; column_idx < conditioned.size(); ++column_idx) {
    trait->set.design.col(base + static_cast<Eigen::Index>(column_idx)) =
        window.dosages.col(static_cast<Eigen::Index>(conditioned[column_idx]));
    trait->set.design_names.push_back("signal " + labels[conditioned[column_idx]]);
  }
  if (inputs.relatedness) {
    fit_trait_null_model(*inputs.options, *inputs.samples, inputs.relatedness, *trait);
  } else {
    trait->model = fit_null_model(trait->set.trait, trait->set.kind, trait->set.y, trait->set.design,
                                  trait->set.design_names);
  }
  trait->kernel_row_samples = trait->set.genotype_index;
  trait->kernel = make_kernel(*trait);
  const bool mixed = trait->mixed || trait->logistic_mixed;
  trait->tests = mixed ? make_mixed_model(*trait, kernel_row_of_sample(*trait))
                       : make_plain_model(trait->model, inputs.penalized_refit);
  return trait;
}

std::vector<ScoreResult> score_window(const TraitContext& trait, const WindowVariants& window) {
  const std::size_t width = window.size();
  GatheredBlock gathered;
  gathered.genotypes.assign(window.dosages.data(), window.dosages.data() + window.dosages.size());
  gathered.missing_starts.assign(width + 1, 0);
  const std::vector<double> fills(width, 0.0);  // nothing is missing: imputed already
  const ImputedDosages imputed{gathered.missing_rows.data(), gathered.missing_starts.data(), fills.data()};
  std::vector<double> scratch;
  const KernelInput input = trait.tests->prepare_block(gathered, width, fills.data(), imputed, scratch);
  std::vector<ScoreResult> scores(width);
  ScoreScratch score_scratch;
  if (width > 0) trait.kernel->compute(input.genotypes, width, score_scratch, scores.data(), input.imputed);
  return scores;
}

double primary_log_p(const Confirmation& confirmation, const ScoreResult& score) {
  if (confirmation.keeps_score || !confirmation.result.converged) return score.log_p;
  return confirmation.result.lrt_log_p;
}

LocusSignals find_signals(const ConditionalFitter& fit, const WindowVariants& window, std::optional<std::size_t> lead,
                          const SelectionSettings& settings) {
  LocusSignals locus;
  if (window.size() == 0 || settings.max_signals == 0) return locus;
  FitCache fits(fit);
  const double threshold = std::log(settings.select_below);
  std::vector<std::size_t> selected;
  std::vector<double> selection_log_p;
  if (lead) {
    const TraitContext& marginal = fits.get({});
    const ScoreResult score = score_window(marginal, window)[*lead];
    const Confirmation refit = marginal.tests->confirm(column_of(window, *lead), window.minor_allele_counts[*lead]);
    selected.push_back(*lead);
    selection_log_p.push_back(primary_log_p(refit, score));
  }
  while (selected.size() < settings.max_signals) {
    const std::optional<Candidate> best = best_candidate(fits.get(selected), window, selected);
    if (!best || !(best->log_p < threshold)) break;
    selected.push_back(best->variant);
    selection_log_p.push_back(best->log_p);
  }
  for (std::size_t signal_idx = 0; signal_idx < selected.size(); ++signal_idx) {
    const std::size_t variant = selected[signal_idx];
    const TraitContext& others = fits.get(all_but(selected, variant));
    SignalFit signal;
    signal.variant = variant;
    signal.selection_log_p = selection_log_p[signal_idx];
    signal.joint = others.tests->confirm(column_of(window, variant), window.minor_allele_counts[variant]);
    signal.conditional = score_window(others, window);
    signal.credible = credible_set_of(signal.conditional, settings.prior_effect_sd);
    locus.signals.push_back(std::move(signal));
  }
  return locus;
}

}  // namespace tamis
