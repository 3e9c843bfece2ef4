// Credible sets of one association signal from each variant's effect and SE.
//
// Bayes factors are Wakefield's approximation (Wakefield 2009, Genet
// Epidemiol 33:79-86): with the estimate beta ~ N(b, V), V = SE^2, and the
// prior b ~ N(0, W) under association, the Bayes factor for association is
// the ratio of beta's marginal densities,
//   BF = N(beta; 0, V + W) / N(beta; 0, V)
//      = sqrt(V / (V + W)) * exp(z^2 / 2 * W / (V + W)),   z = beta / SE.
// Under one causal variant in the window and the same prior probability for
// every variant, a variant's posterior inclusion probability is its BF over
// the sum of all BFs. Everything is computed in logs, so BFs far beyond the
// range of a double (z of 40 and more) neither overflow nor lose precision.
//
// Pure computation: no I/O.
#pragma once

#include <cstddef>
#include <vector>

namespace tamis {

struct CredibleEvidence {
  double beta;
  double standard_error;
};

struct CredibleMember {
  double log10_bayes_factor;  // NaN where the evidence is unusable (see below)
  double pip;                 // posterior inclusion probability
  bool in_95;
  bool in_99;
};

struct CredibleSet {
  std::vector<CredibleMember> members;  // one per evidence entry, in input order
  std::size_t size_95;
  std::size_t size_99;
};

// One causal variant among the entries, equal prior for each; members in
// input order. The credible set at level c is the smallest set of variants,
// taken by decreasing PIP, whose PIPs sum to at least c; equal PIPs are taken
// in input order. An entry whose SE is not finite or not positive, whose
// beta is not finite, or whose z^2 overflows a double carries no evidence:
// its log10 BF is NaN, its PIP 0, and it is never a member. With no usable
// entry every PIP is 0 and both sets are empty. prior_effect_sd must be
// finite and positive (std::invalid_argument otherwise).
CredibleSet credible_set(const std::vector<CredibleEvidence>& evidence, double prior_effect_sd);

// The size of the credible set at `level` (0 < level <= 1) for members as
// credible_set returns them: the number of usable variants, by decreasing
// PIP, needed to reach `level` (all usable variants if rounding keeps the sum
// just below it).
std::size_t credible_set_size(const std::vector<CredibleMember>& members, double level);

// The default prior SD of the effect, sqrt(W).
// - Binary traits (effects are log odds ratios): 0.2. Wakefield's choice is a
//   prior under which 95% of odds ratios lie below about 1.5, so
//   sqrt(W) = log(1.5) / 1.96 = 0.207, which fine-mapping practice rounds to
//   0.2 (W = 0.04). From memory of the paper, not checked against its text.
// - Quantitative traits: 0.15 trait SDs (the effect is in the trait's units),
//   i.e. a prior under which 95% of per-allele effects are below 0.3 trait SDs;
//   common practice, from memory. trait_sd must be finite and positive
//   (std::invalid_argument otherwise); it is ignored for binary traits.
double default_prior_effect_sd(bool binary_trait, double trait_sd);

}  // namespace tamis
