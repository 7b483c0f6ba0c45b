#include "gyre/core/rng.hpp"

#include <cmath>

namespace gyre {
namespace {
std::uint64_t splitmix64(std::uint64_t& x) {
  std::uint64_t z = (x += 0x9E3779B97F4A7C15ULL);
  z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ULL;
  z = (z ^ (z >> 27)) * 0x94D049BB133111EBULL;
  return z ^ (z >> 31);
}
std::uint64_t rotl(std::uint64_t x, int k) { return (x << k) | (x >> (64 - k)); }
}  // namespace

void Rng::reseed(std::uint64_t seed) {
  std::uint64_t x = seed;
  for (auto& w : s_) w = splitmix64(x);
  has_cached_normal_ = false;
  cached_normal_ = 0.0f;
}

std::uint64_t Rng::next_u64() {
  const std::uint64_t result = rotl(s_[1] * 5, 7) * 9;
  const std::uint64_t t = s_[1] << 17;
  s_[2] ^= s_[0];
  s_[3] ^= s_[1];
  s_[1] ^= s_[2];
  s_[0] ^= s_[3];
  s_[2] ^= t;
  s_[3] = rotl(s_[3], 45);
  return result;
}

float Rng::uniform() { return static_cast<float>(next_u64() >> 40) * (1.0f / 16777216.0f); }

double Rng::uniform_double() { return static_cast<double>(next_u64() >> 11) * (1.0 / 9007199254740992.0); }

std::uint64_t Rng::below(std::uint64_t n) {
  // Rejection sampling: drop draws from the incomplete top block so every residue is equally
  // likely (portable; no 128-bit multiply).
  const std::uint64_t limit = UINT64_MAX - UINT64_MAX % n;
  std::uint64_t x = next_u64();
  while (x >= limit) x = next_u64();
  return x % n;
}

float Rng::normal() {
  if (has_cached_normal_) {
    has_cached_normal_ = false;
    return cached_normal_;
  }
  double u1 = 0.0;
  do {
    u1 = uniform_double();
  } while (u1 <= 0.0);
  const double u2 = uniform_double();
  const double r = std::sqrt(-2.0 * std::log(u1));
  const double theta = 6.283185307179586 * u2;
  cached_normal_ = static_cast<float>(r * std::sin(theta));
  has_cached_normal_ = true;
  return static_cast<float>(r * std::cos(theta));
}

Rng Rng::split() {
  Rng child(next_u64());
  return child;
}

Rng::State Rng::state() const {
  State st{};
  for (int i = 0; i < 4; ++i) st.s[i] = s_[i];
  st.cached_normal = cached_normal_;
  st.has_cached_normal = has_cached_normal_;
  return st;
}

void Rng::set_state(const State& st) {
  for (int i = 0; i < 4; ++i) s_[i] = st.s[i];
  cached_normal_ = st.cached_normal;
  has_cached_normal_ = st.has_cached_normal;
}

std::uint64_t stable_hash(const void* data, std::size_t size, std::uint64_t seed) {
  std::uint64_t h = 0xcbf29ce484222325ULL ^ seed;
  const auto* p = static_cast<const unsigned char*>(data);
  for (std::size_t i = 0; i < size; ++i) {
    h ^= p[i];
    h *= 0x100000001b3ULL;
  }
  return h;
}

std::uint64_t stable_hash(std::span<const unsigned char> bytes, std::uint64_t seed) {
  return stable_hash(bytes.data(), bytes.size(), seed);
}

}  // namespace gyre
