// The trait model of an interaction scan (--interaction-with): every
// variant's score test is of its interaction with the exposure, and hits are
// refitted with the full interaction model (tamis/interaction.hpp).
#pragma once

#include <memory>
#include <string>

#include "scan/trait_model.hpp"
#include "scan/trait_pass.hpp"
#include "tamis/interaction.hpp"

namespace tamis {

// The exposure's columns are the null model's columns named `exposure` (a
// numeric covariate) or `exposure=LEVEL` (a text one's indicators). Throws
// tamis::Error (model) when none is left (the exposure is constant or
// collinear with other covariates among the trait's analysis samples).
std::unique_ptr<TraitModel> make_interaction_model(const TraitContext& trait, const std::string& exposure,
                                                   RobustErrors robust);

// The names of the columns an interaction scan adds after the standard ones.
const std::vector<std::string>& interaction_columns();

}  // namespace tamis
