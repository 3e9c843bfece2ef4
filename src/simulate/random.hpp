// The simulator's random numbers: xoshiro256** seeded through splitmix64.
#pragma once

#include <cmath>
#include <cstddef>
#include <cstdint>

namespace tamis::simulation {

// xoshiro256** seeded through splitmix64: small, fast, and the same stream on
// every platform (the standard library's distributions are not).
class Random {
 public:
  explicit Random(std::uint64_t seed) {
    for (auto& word : state_) word = split_mix(seed);
  }
  std::uint64_t next() {
    const std::uint64_t result = rotate(state_[1] * 5, 7) * 9;
    const std::uint64_t shifted = state_[1] << 17;
    state_[2] ^= state_[0];
    state_[3] ^= state_[1];
    state_[1] ^= state_[2];
    state_[0] ^= state_[3];
    state_[2] ^= shifted;
    state_[3] = rotate(state_[3], 45);
    return result;
  }
  double uniform() { return static_cast<double>(next() >> 11) * 0x1.0p-53; }
  double uniform(double low, double high) { return low + (high - low) * uniform(); }
  bool bernoulli(double p) { return uniform() < p; }
  double normal() {
    if (has_spare_) {
      has_spare_ = false;
      return spare_;
    }
    double u1 = uniform();
    while (u1 <= 0.0) u1 = uniform();
    const double u2 = uniform();
    const double radius = std::sqrt(-2.0 * std::log(u1));
    spare_ = radius * std::sin(2.0 * M_PI * u2);
    has_spare_ = true;
    return radius * std::cos(2.0 * M_PI * u2);
  }
  std::size_t index(std::size_t count) { return static_cast<std::size_t>(uniform() * count) % count; }

 private:
  static std::uint64_t rotate(std::uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
  static std::uint64_t split_mix(std::uint64_t& x) {
    std::uint64_t z = (x += 0x9e3779b97f4a7c15ULL);
    z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
    z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
    return z ^ (z >> 31);
  }
  std::uint64_t state_[4];
  bool has_spare_ = false;
  double spare_ = 0.0;
};

// Seeds of independent streams derived from the user's seed, so that one part of
// the cohort (families, the polygenic loci) can change without moving the others.
inline std::uint64_t stream_seed(std::uint64_t seed, std::uint64_t stream) {
  return seed ^ (0xd1b54a32d192ed03ULL * stream);
}

}  // namespace tamis::simulation
