// The polygenic component of the traits (--heritability).
#pragma once

#include <array>
#include <cstdint>
#include <vector>

#include "people.hpp"

namespace tamis::simulation {

// Genetic values of the two traits (fev1_litres, winter_wheeze) for every
// sample, in the order of Cohort::samples, each with mean 0 and variance 1
// over the samples. They come from many hidden loci of small effect, which
// relatives share by Mendelian transmission and which are not written to the
// VCF, so the written variants carry no polygenic association themselves.
std::vector<std::array<double, 2>> draw_genetic_values(const Cohort& cohort, std::uint64_t seed);

}  // namespace tamis::simulation
