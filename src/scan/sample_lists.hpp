// --keep-samples and --drop-samples: files of sample IDs, one per line,
// applied to the genotype samples (shared by scan and relatedness).
#pragma once

#include <string>
#include <vector>

namespace tamis {

// True for each genotype sample that the keep list leaves out or the drop
// list names; empty when neither path is given. IDs of a list that name no
// genotype sample are counted in the log (a typo would otherwise go
// unnoticed). Throws tamis::Error (usage) for an unreadable list.
std::vector<bool> excluded_samples(const std::string& keep_path, const std::string& drop_path,
                                   const std::vector<std::string>& samples);

}  // namespace tamis
