#include "scan/trait_model.hpp"

#include "scan/trait_pass.hpp"
#include "tamis/firth.hpp"

namespace tamis {
namespace {

ConfirmResult from_firth(const FirthResult& firth) {
  ConfirmResult result;
  result.beta = firth.beta;
  result.se = firth.se;
  result.wald_chisq = firth.wald_chisq;
  result.wald_log_p = firth.wald_log_p;
  result.lrt_chisq = firth.lrt_chisq;
  result.lrt_log_p = firth.lrt_log_p;
  result.iterations = firth.iterations;
  result.converged = firth.converged;
  return result;
}

class PlainModel : public TraitModel {
 public:
  PlainModel(const NullModel& model, PenalizedRefit penalized_refit)
      : model_(model), penalized_refit_(penalized_refit) {}

  KernelInput prepare_block(const GatheredBlock& gathered, std::size_t, const double*,
                            const ImputedDosages& imputed, std::vector<double>&) const override {
    return {gathered.genotypes.data(), &imputed};
  }

  // The standard refit, replaced by Firth's where the standard one cannot be
  // trusted: separation, no convergence, or too few copies of the minor allele.
  Confirmation confirm(const Eigen::VectorXd& genotype, double minor_allele_count) const override {
    Confirmation confirmation;
    const bool binary = model_.kind == TraitKind::binary;
    confirmation.by_firth = binary && penalized_refit_ == PenalizedRefit::always;
    if (!confirmation.by_firth) {
      confirmation.result = confirm_variant(model_, genotype);
      confirmation.by_firth = binary && wants_firth(confirmation.result, minor_allele_count);
    }
    if (confirmation.by_firth) confirmation.result = from_firth(firth_refit(model_, genotype));
    return confirmation;
  }

 private:
  bool wants_firth(const ConfirmResult& standard, double minor_allele_count) const {
    switch (penalized_refit_) {
      case PenalizedRefit::always: return true;
      case PenalizedRefit::never: return false;
      case PenalizedRefit::automatic: break;
    }
    return !standard.converged || minor_allele_count < kFirthBelowMinorAlleleCount;
  }

  const NullModel& model_;
  PenalizedRefit penalized_refit_;
};

}  // namespace

std::unique_ptr<TraitModel> make_plain_model(const NullModel& model, PenalizedRefit penalized_refit) {
  return std::make_unique<PlainModel>(model, penalized_refit);
}

}  // namespace tamis
