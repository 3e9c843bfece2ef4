// Linkage disequilibrium between two variants from individual-level data:
// the squared Pearson correlation of their dosages over one trait's analysis
// samples. Statistics only, no I/O, so it is tested on small vectors.
#pragma once

#include <vector>

namespace tamis {

// Replaces each missing dosage (NaN) by the mean of the called ones, as the
// scan imputes a tested variant's missing dosages over a trait's analysis
// samples. Returns false, leaving the values as they are, when none is called.
bool impute_missing_with_mean(std::vector<double>& dosages);

// r^2 = cor(a, b)^2 over paired values (no NaN; impute first). The sums are
// taken about the means, so the result agrees with a textbook correlation
// to rounding even for rare variants. NaN when either variant does not vary
// (or there are no values), since its correlation is then undefined.
double dosage_r_squared(const std::vector<double>& a, const std::vector<double>& b);

}  // namespace tamis
