// expm1 and log1p on the ranges the saddlepoint needs, written with +, -, *
// and / only: they vectorise inside TAMIS_VECTOR_CLONES loops, and they give
// the same bits on every machine, which library calls do not promise.
#pragma once

#include <cstdint>
#include <cstring>

#include "common/vector_clones.hpp"

namespace tamis::detail {

// expm1(x) for x <= 0, from +, -, * and / only, so that it vectorises and
// gives the same bits on every machine: x = k ln2 + r with |r| <= ln2 / 2,
// expm1(r) from its Taylor series to r^13 (error below 5e-18), then
// expm1(x) = 2^k expm1(r) + (2^k - 1), which does not cancel for k < 0.
TAMIS_ALWAYS_INLINE double expm1_nonpositive(double x) {
  constexpr double kLn2High = 0x1.62e42fee00000p-1;  // ln 2 with trailing zero bits
  constexpr double kLn2Low = 0x1.a39ef35793c76p-33;  // ln 2 - kLn2High
  constexpr double kInverseLn2 = 0x1.71547652b82fep0;
  constexpr double kRoundingShift = 0x1.8p52;  // adding it rounds to an integer
  x = x < -40.0 ? -40.0 : x;                    // e^-40 is below half an ulp of 1
  const double shifted = x * kInverseLn2 + kRoundingShift;
  const double k = shifted - kRoundingShift;
  const double r = (x - k * kLn2High) - k * kLn2Low;
  // 1/13!, 1/12!, ..., 1/2!, 1/1!
  constexpr double kTaylor[] = {1.0 / 6227020800.0, 1.0 / 479001600.0, 1.0 / 39916800.0, 1.0 / 3628800.0,
                                1.0 / 362880.0,     1.0 / 40320.0,     1.0 / 5040.0,      1.0 / 720.0,
                                1.0 / 120.0,        1.0 / 24.0,        1.0 / 6.0,         0.5,
                                1.0};
  double p = 0.0;
  for (double coefficient : kTaylor) p = p * r + coefficient;
  p = p * r;  // expm1(r)
  // 2^k for k in [-58, 0], built from its exponent bits: `shifted` holds k
  // in the low bits of its significand.
  constexpr std::int64_t kShiftBits = 0x4338000000000000;  // the bits of kRoundingShift
  std::int64_t k_bits;
  std::memcpy(&k_bits, &shifted, sizeof k_bits);
  const std::int64_t scale_bits = (k_bits - kShiftBits + 1023) << 52;
  double scale;
  std::memcpy(&scale, &scale_bits, sizeof scale);
  return scale * p + (scale - 1.0);
}

// ln(1 + y) for y in (-1, 0], from +, -, * and / only (see expm1_nonpositive):
// u = 1 + y = 2^k f with f in [sqrt(1/2), sqrt(2)), ln f = 2 atanh(z) for
// z = (f - 1) / (f + 1), |z| < 0.172, from its series to z^21 (error below
// 3e-18), and ln(1 + y) = ln(u) y / (u - 1), which restores what rounding
// 1 + y lost (Goldberg 1991, "What every computer scientist should know
// about floating-point arithmetic", theorem 4).
TAMIS_ALWAYS_INLINE double log1p_nonpositive(double y) {
  constexpr double kLn2High = 0x1.62e42fee00000p-1;
  constexpr double kLn2Low = 0x1.a39ef35793c76p-33;
  constexpr double kSqrt2 = 0x1.6a09e667f3bcdp0;
  constexpr std::int64_t kExponentMask = 0x7ff0000000000000;
  constexpr std::int64_t kOneBits = 0x3ff0000000000000;       // 1.0
  constexpr std::int64_t kIntegerShiftBits = 0x4330000000000000;  // 2^52
  const double u = 1.0 + y;
  std::int64_t bits;
  std::memcpy(&bits, &u, sizeof bits);
  // f in [1, 2) from the significand; the exponent k as a double, exactly.
  const std::int64_t f_bits = (bits & ~kExponentMask) | kOneBits;
  const std::int64_t exponent_bits = ((bits & kExponentMask) >> 52) | kIntegerShiftBits;
  double f, exponent;
  std::memcpy(&f, &f_bits, sizeof f);
  std::memcpy(&exponent, &exponent_bits, sizeof exponent);
  double k = exponent - (0x1p52 + 1023.0);
  const bool halve = f > kSqrt2;
  f = halve ? f * 0.5 : f;
  k = halve ? k + 1.0 : k;
  const double z = (f - 1.0) / (f + 1.0);
  const double z2 = z * z;
  // 1/21, 1/19, ..., 1/3, 1
  constexpr double kOddReciprocals[] = {1.0 / 21.0, 1.0 / 19.0, 1.0 / 17.0, 1.0 / 15.0, 1.0 / 13.0, 1.0 / 11.0,
                                        1.0 / 9.0,  1.0 / 7.0,  1.0 / 5.0,  1.0 / 3.0,  1.0};
  double series = 0.0;
  for (double coefficient : kOddReciprocals) series = series * z2 + coefficient;
  const double log_u = (k * kLn2High + 2.0 * z * series) + k * kLn2Low;
  const double denominator = u - 1.0;
  // u == 1: y is below half an ulp of 1, and ln(1 + y) = y to double precision.
  return denominator == 0.0 ? y : log_u * (y / denominator);
}

}  // namespace tamis::detail
