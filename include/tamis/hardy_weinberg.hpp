// The exact test of Hardy-Weinberg equilibrium for one biallelic site
// (Wigginton, Cutler & Abecasis 2005, AJHG 76:887-893).
#pragma once

#include <cstdint>

namespace tamis {

// Natural log of the two-sided exact p: the probability, given the allele
// counts, of every heterozygote count whose probability is at most that of the
// observed one (compared with a relative tolerance of 1e-7, so that counts
// equally likely up to rounding are all included). No calls give ln p = 0.
// Stays exact where p underflows a double.
double hardy_weinberg_exact_log_p(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt);

// The same p on the linear scale (underflows to 0 below about 1e-308).
double hardy_weinberg_exact_p(std::uint64_t hom_ref, std::uint64_t het, std::uint64_t hom_alt);

}  // namespace tamis
