#pragma once
// The one source of randomness in gyre. Every draw is defined by this file alone (no
// std::*_distribution, whose output differs between standard libraries), so the same seed gives
// the same numbers on every platform and compiler.

#include <cstddef>
#include <cstdint>
#include <span>
#include <utility>

namespace gyre {

/// xoshiro256** (Blackman & Vigna 2018) seeded through splitmix64.
class Rng {
 public:
  explicit Rng(std::uint64_t seed = 0x9E3779B97F4A7C15ULL) { reseed(seed); }
  void reseed(std::uint64_t seed);

  std::uint64_t next_u64();
  /// Uniform in [0, 1) with 24 random bits.
  float uniform();
  /// Uniform in [lo, hi).
  float uniform(float lo, float hi) { return lo + (hi - lo) * uniform(); }
  /// Uniform in [0, 1) with 53 random bits.
  double uniform_double();
  /// Uniform integer in [0, n); n > 0. Unbiased (rejection sampling).
  std::uint64_t below(std::uint64_t n);
  /// Standard normal, Box-Muller (both values used, the second cached).
  float normal();
  /// A new generator whose stream is independent of this one (for workers, layers ...).
  Rng split();

  /// Fisher-Yates shuffle.
  template <typename T>
  void shuffle(std::span<T> items) {
    for (std::size_t i = items.size(); i > 1; --i) {
      std::size_t j = static_cast<std::size_t>(below(i));
      std::swap(items[i - 1], items[j]);
    }
  }

  /// Full state, for checkpoints: resuming from it continues the exact stream.
  struct State {
    std::uint64_t s[4];
    float cached_normal;
    bool has_cached_normal;
  };
  State state() const;
  void set_state(const State& st);

 private:
  std::uint64_t s_[4]{};
  float cached_normal_ = 0.0f;
  bool has_cached_normal_ = false;
};

/// 64-bit FNV-1a hash of bytes: stable across platforms (used for deterministic data splits).
std::uint64_t stable_hash(std::span<const unsigned char> bytes, std::uint64_t seed = 0);
std::uint64_t stable_hash(const void* data, std::size_t size, std::uint64_t seed = 0);

}  // namespace gyre
