// Small value types shared between stages.
#pragma once

#include <string>

namespace tamis {

enum class TraitKind { quantitative, binary };

inline const char* trait_kind_name(TraitKind kind) {
  return kind == TraitKind::binary ? "binary" : "quantitative";
}

}  // namespace tamis
