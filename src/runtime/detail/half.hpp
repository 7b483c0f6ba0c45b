#pragma once
// IEEE 754-2008 binary16 <-> binary32 conversion in portable C++ (bit manipulation, no F16C).
// float -> half rounds to nearest, ties to even; overflow gives +-inf, NaN stays NaN (quiet),
// tiny values become subnormal halves or +-0.

#include <cstdint>
#include <cstring>

namespace gyre::runtime::detail {

inline float half_to_float(std::uint16_t h) noexcept {
  const std::uint32_t sign = static_cast<std::uint32_t>(h & 0x8000U) << 16;
  const std::uint32_t exp = (h >> 10) & 0x1FU;
  std::uint32_t mant = h & 0x3FFU;
  std::uint32_t bits;
  if (exp == 0) {
    if (mant == 0) {
      bits = sign;
    } else {  // subnormal: normalise
      std::uint32_t e = 113;  // 127 - 15 + 1
      while ((mant & 0x400U) == 0) {
        mant <<= 1;
        --e;
      }
      bits = sign | (e << 23) | ((mant & 0x3FFU) << 13);
    }
  } else if (exp == 31) {
    bits = sign | 0x7F800000U | (mant << 13);
  } else {
    bits = sign | ((exp + 112) << 23) | (mant << 13);
  }
  float f;
  std::memcpy(&f, &bits, sizeof f);
  return f;
}

inline std::uint16_t float_to_half(float f) noexcept {
  std::uint32_t x;
  std::memcpy(&x, &f, sizeof x);
  const auto sign = static_cast<std::uint16_t>((x >> 16) & 0x8000U);
  const std::uint32_t abs = x & 0x7FFFFFFFU;
  if (abs >= 0x7F800000U) {  // inf or NaN
    return static_cast<std::uint16_t>(sign | 0x7C00U | (abs > 0x7F800000U ? 0x200U : 0U));
  }
  if (abs >= 0x477FF000U) return static_cast<std::uint16_t>(sign | 0x7C00U);  // rounds to >= 65520: inf
  const std::uint32_t exp = abs >> 23;
  if (exp < 113) {  // result is subnormal or zero: value = mant * 2^-24
    if (exp < 102) return sign;  // < 2^-25: rounds to zero (2^-25 exactly ties to even 0)
    const std::uint32_t mant = (abs & 0x7FFFFFU) | 0x800000U;
    const std::uint32_t shift = 126 - exp;  // bits dropped to land on the 2^-24 grid
    std::uint32_t q = mant >> shift;
    const std::uint32_t rem = mant & ((1U << shift) - 1U);
    const std::uint32_t halfway = 1U << (shift - 1);
    if (rem > halfway || (rem == halfway && (q & 1U))) ++q;
    return static_cast<std::uint16_t>(sign | q);
  }
  // Normal: rebias exponent, round the 13 dropped mantissa bits to nearest even.
  std::uint32_t h = ((exp - 112) << 10) | ((abs >> 13) & 0x3FFU);
  const std::uint32_t rem = abs & 0x1FFFU;
  if (rem > 0x1000U || (rem == 0x1000U && (h & 1U))) ++h;  // carry may roll into the exponent: correct
  return static_cast<std::uint16_t>(sign | h);
}

}  // namespace gyre::runtime::detail
