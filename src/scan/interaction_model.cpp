#include "scan/interaction_model.hpp"

#include <algorithm>
#include <cmath>

#include "tamis/errors.hpp"
#include "tamis/interaction_score.hpp"
#include "tamis/results_writer.hpp"
#include "tamis/run_log.hpp"

namespace tamis {
namespace {

// The exposure's columns of the null design, and their names.
Eigen::MatrixXd exposure_columns(const NullModel& model, const std::string& exposure,
                                 std::vector<std::string>& names) {
  std::vector<Eigen::Index> columns;
  for (std::size_t col = 0; col < model.column_names.size(); ++col) {
    const std::string& name = model.column_names[col];
    if (name == exposure || name.rfind(exposure + "=", 0) == 0) {
      columns.push_back(static_cast<Eigen::Index>(col));
      names.push_back(name);
    }
  }
  Eigen::MatrixXd values(model.design.rows(), static_cast<Eigen::Index>(columns.size()));
  for (std::size_t k = 0; k < columns.size(); ++k) values.col(static_cast<Eigen::Index>(k)) = model.design.col(columns[k]);
  return values;
}

// The values of interaction_columns() in order; a NaN ln p (the joint LR
// test of a score row) is written "#NA".
std::string format_extra_fields(double main_beta, double main_se, double joint_log_p, double joint_model_log_p,
                                double joint_lrt_log_p, double model_log_p, int df) {
  std::string text = "\t";
  append_result_number(main_beta, text);
  text += '\t';
  append_result_number(main_se, text);
  for (const double log_p : {joint_log_p, joint_model_log_p, joint_lrt_log_p, model_log_p}) {
    text += '\t';
    text += format_p_value(log_p);
  }
  text += '\t';
  text += std::to_string(df);
  return text;
}

class InteractionModel : public TraitModel {
 public:
  InteractionModel(const TraitContext& trait, Eigen::MatrixXd exposure, RobustErrors robust)
      : model_(trait.model), exposure_(std::move(exposure)), robust_(robust),
        rows_(trait.kernel_row_samples.size()),
        kernel_(model_, exposure_, kernel_row_of_sample(trait), robust) {
    confirmed_test_ = std::string("interaction_wald") +
                      (robust == RobustErrors::off ? "" : std::string("_") + robust_errors_name(robust));
  }

  KernelInput prepare_block(const GatheredBlock& gathered, std::size_t, const double*, const ImputedDosages& imputed,
                            std::vector<double>&) const override {
    return {gathered.genotypes.data(), &imputed};
  }

  std::vector<std::string> extra_columns() const override { return interaction_columns(); }
  const char* score_test_name() const override { return "interaction_score"; }

  bool score_block(const KernelInput& input, std::size_t width, ScoreResult* scores,
                   std::vector<std::string>& extra_fields) const override {
    thread_local std::vector<double> filled;
    thread_local std::vector<InteractionScore> results;
    filled.assign(input.genotypes, input.genotypes + rows_ * width);
    if (input.imputed) {
      const ImputedDosages& imputed = *input.imputed;
      for (std::size_t variant = 0; variant < width; ++variant) {
        for (std::size_t at = imputed.starts[variant]; at < imputed.starts[variant + 1]; ++at) {
          filled[imputed.rows[at] * width + variant] = imputed.fills[variant];
        }
      }
    }
    results.resize(width);
    kernel_.compute(filled.data(), width, results.data());
    extra_fields.resize(width);
    const int df = static_cast<int>(exposure_.cols());
    for (std::size_t variant = 0; variant < width; ++variant) {
      const InteractionScore& score = results[variant];
      ScoreResult& out = scores[variant];
      out = ScoreResult{};
      out.testable = score.testable;
      out.chisq = score.chisq;
      out.log_p = score.log_p;
      out.beta = score.beta;
      out.se = score.se;
      out.v = score.testable ? 1.0 : 0.0;
      extra_fields[variant] =
          format_extra_fields(score.main_beta, score.main_se, score.joint_log_p, score.joint_model_log_p,
                              std::nan(""), score.model_log_p, df);
    }
    return true;
  }

  Confirmation confirm(const Eigen::VectorXd& genotype, double) const override {
    const InteractionFit fit = fit_interaction(model_, exposure_, genotype, robust_);
    Confirmation confirmation;
    confirmation.test = confirmed_test_.c_str();
    confirmation.wald_is_primary = true;
    if (!fit.estimable) {
      confirmation.keeps_score = true;
      confirmation.result.converged = false;
      return confirmation;
    }
    ConfirmResult& result = confirmation.result;
    result.beta = fit.interaction_beta[0];
    result.se = fit.interaction_se[0];
    result.wald_chisq = fit.interaction_robust.statistic;
    result.wald_log_p = fit.interaction_robust.log_p;
    result.lrt_chisq = fit.interaction_lr.statistic;
    result.lrt_log_p = fit.interaction_lr.log_p;
    result.iterations = fit.iterations;
    result.converged = fit.converged;
    confirmation.extra_fields =
        format_extra_fields(fit.main_beta, fit.main_se, fit.joint_robust.log_p, fit.joint_model.log_p,
                            fit.joint_lr.log_p, fit.interaction_model.log_p, fit.interaction_model.df);
    return confirmation;
  }

 private:
  const NullModel& model_;
  Eigen::MatrixXd exposure_;
  RobustErrors robust_;
  std::size_t rows_;
  InteractionScoreKernel kernel_;
  std::string confirmed_test_;
};

}  // namespace

const std::vector<std::string>& interaction_columns() {
  static const std::vector<std::string> columns = {"main_beta",       "main_standard_error", "joint_p",
                                                   "joint_model_p",   "joint_lrt_p",         "interaction_model_p",
                                                   "interaction_df"};
  return columns;
}

std::unique_ptr<TraitModel> make_interaction_model(const TraitContext& trait, const std::string& exposure,
                                                   RobustErrors robust) {
  std::vector<std::string> names;
  Eigen::MatrixXd columns = exposure_columns(trait.model, exposure, names);
  if (columns.cols() == 0) {
    throw Error(ExitCode::model, "trait '" + trait.set.trait + "'",
                "the exposure '" + exposure + "' of --interaction-with is constant or collinear with the other "
                "covariates among the trait's analysis samples, so its interaction cannot be tested",
                "choose an exposure that varies, or drop the covariate it duplicates");
  }
  std::string listed;
  for (const std::string& name : names) listed += (listed.empty() ? "" : ", ") + name;
  current_log().line("trait " + trait.set.trait + ": interaction with " + listed + " (" +
                     std::to_string(columns.cols()) + " df), " +
                     (robust == RobustErrors::off ? std::string("model-based variances")
                                                  : std::string(robust_errors_name(robust)) + " sandwich variances"));
  return std::make_unique<InteractionModel>(trait, std::move(columns), robust);
}

}  // namespace tamis
