// What the per-trait stage asks of a trait's null model besides the score
// kernel: the block the kernel reads, and the confirmation refit of a hit.
// One implementation per class of null model (plain regression, linear
// mixed model, ...), so that the per-trait stage stays an orchestrator and
// grows no branch per model.
#pragma once

#include <Eigen/Dense>
#include <cstddef>
#include <memory>
#include <string>
#include <vector>

#include "tamis/confirm.hpp"
#include "tamis/null_model.hpp"
#include "tamis/saddlepoint.hpp"
#include "tamis/scan.hpp"
#include "tamis/score_kernel.hpp"

namespace tamis {

struct GatheredBlock;

// The sample-major dosages the score kernel reads, and the missing dosages
// it must impute itself (none once the model has imputed them).
struct KernelInput {
  const double* genotypes = nullptr;
  const ImputedDosages* imputed = nullptr;
};

struct Confirmation {
  ConfirmResult result;
  bool by_firth = false;  // Firth's penalised likelihood replaced the standard refit
  // The refit failed (separation) and no penalised refit applies: the score
  // test's p-value stays the row's primary one.
  bool keeps_score = false;
  // Models that test something other than the main effect (interaction):
  // the row's test name, the Wald p-value as its primary one, and the values
  // of its extra columns (see TraitModel::extra_columns).
  const char* test = nullptr;
  bool wald_is_primary = false;
  std::string extra_fields;
};

class TraitModel {
 public:
  virtual ~TraitModel() = default;
  // `fills` holds each site's imputed dosage, `imputed` the gathered block's
  // list of missing dosages with those fills; `scratch` may receive a copy.
  virtual KernelInput prepare_block(const GatheredBlock& gathered, std::size_t width, const double* fills,
                                    const ImputedDosages& imputed, std::vector<double>& scratch) const = 0;
  // `genotype` holds the variant's imputed dosages over the analysis samples.
  virtual Confirmation confirm(const Eigen::VectorXd& genotype, double minor_allele_count) const = 0;
  // The variance the saddlepoint approximation gives the score (Bernoulli
  // outcomes given the model's fitted means) for a variant whose kernel
  // variance is `score.v`; the score is scaled by the square root of their
  // ratio before the tail is taken. The same for independent samples.
  virtual double saddlepoint_variance(const SaddlepointContext& context, const Eigen::VectorXd& genotype,
                                      const ScoreResult& score) const {
    (void)context;
    (void)genotype;
    return score.v;
  }
  // Columns this model's rows add after the standard ones.
  virtual std::vector<std::string> extra_columns() const { return {}; }
  virtual const char* score_test_name() const { return "score"; }
  // A model that tests something other than the variant's main effect
  // scores the block itself (from prepare_block's input) and returns true,
  // with each variant's extra columns in `extra_fields`; false leaves the
  // scores to the trait's score kernel.
  virtual bool score_block(const KernelInput& input, std::size_t width, ScoreResult* scores,
                           std::vector<std::string>& extra_fields) const {
    (void)input;
    (void)width;
    (void)scores;
    (void)extra_fields;
    return false;
  }
};

// Least squares or logistic regression of independent samples; binary hits
// are refitted by Firth's penalised likelihood where the standard refit
// cannot be trusted (see PenalizedRefit).
std::unique_ptr<TraitModel> make_plain_model(const NullModel& model, PenalizedRefit penalized_refit);

}  // namespace tamis
