// Independent signals at one locus: stepwise conditional selection, the
// joint fit of the selected variants, and each signal's conditional results
// and credible set. Works through a trait's TraitContext, so that plain and
// mixed models (and Firth's refits) are those of the scan. No I/O.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <functional>
#include <memory>
#include <optional>
#include <string>
#include <vector>

#include "scan/related_samples.hpp"
#include "scan/trait_pass.hpp"
#include "tamis/credible_sets.hpp"

namespace tamis {

// The variants of one window over a trait's analysis samples, missing
// dosages imputed with the mean: row-major, analysis sample s and variant j
// at dosages(s, j), which is the sample-major layout the score kernel reads.
struct WindowVariants {
  Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor> dosages;
  std::vector<double> minor_allele_counts;  // decides Firth's refits (PenalizedRefit::automatic)
  std::size_t size() const { return static_cast<std::size_t>(dosages.cols()); }
};

// The trait's model with the given dosage columns added to its covariates,
// ready to score and confirm (kernel rows: the analysis samples).
using ConditionalFitter = std::function<std::unique_ptr<TraitContext>(const std::vector<std::size_t>& conditioned)>;

struct SelectionSettings {
  double select_below = 5e-8;  // a further signal needs its conditional p below this
  std::size_t max_signals = 10;
  double prior_effect_sd = 0.2;  // of the credible sets' Bayes factors
};

struct SignalFit {
  std::size_t variant = 0;    // into the window
  double selection_log_p = 0.0;  // ln p when it was selected (the lead: its marginal p)
  Confirmation joint;         // its refit given every other signal: the joint fit's coefficient
  std::vector<ScoreResult> conditional;  // every window variant given every other signal
  CredibleSet credible;
};

struct LocusSignals {
  std::vector<SignalFit> signals;  // in the order selected
};

// Stepwise selection: the lead first (or, when `lead` is empty, the window's
// variant of smallest p, if it is below select_below); then, while fewer than
// max_signals, condition on the selected ones, score every other variant,
// refit the best few and add the one of smallest refit p (the likelihood
// ratio's, or the score test's where no refit applies) if it is below
// select_below. Then each signal's joint refit and conditional scores given
// all the others, and its credible set from those scores.
LocusSignals find_signals(const ConditionalFitter& fit, const WindowVariants& window, std::optional<std::size_t> lead,
                          const SelectionSettings& settings);

// What a trait's conditional models are made of: its analysis set (with any
// --condition-on columns), and with relatedness the scan's options and the
// genotype samples that the mixed model's fit needs.
struct ConditionalModelInputs {
  const AnalysisSet* set = nullptr;
  PenalizedRefit penalized_refit = PenalizedRefit::automatic;
  const ScanOptions* options = nullptr;            // with relatedness only
  const std::vector<std::string>* samples = nullptr;  // with relatedness only
  const ScanRelatedness* relatedness = nullptr;    // null: least squares or logistic regression
};

// The trait's model with window variants `conditioned` added to its
// covariates (named "signal LABEL" from `labels`, one per window variant).
// A plain model is fitted without a log line: a locus fits several, and
// loci run in parallel; a mixed one logs its fit.
std::unique_ptr<TraitContext> fit_conditional(const ConditionalModelInputs& inputs, const WindowVariants& window,
                                              const std::vector<std::string>& labels,
                                              const std::vector<std::size_t>& conditioned);

// The score test of every window variant under a fitted trait model.
std::vector<ScoreResult> score_window(const TraitContext& trait, const WindowVariants& window);

// The p-value a refit stands for: the likelihood ratio's, or the score
// test's when the refit failed and none replaced it.
double primary_log_p(const Confirmation& confirmation, const ScoreResult& score);

}  // namespace tamis
