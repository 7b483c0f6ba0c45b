#pragma once
// A classification corpus with a learnable signal for trainer tests: each of three classes has
// its own cue words, hidden at a random position among shared filler words; no label noise.
// Class shares 40/30/30%, so the majority baseline is about 0.4.

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <fstream>

#include "gyre/core/rng.hpp"

namespace gyre::test {

/// Writes n examples (TSV with a header) of 4 .. 4 + extra_words - 1 words each.
inline void write_learnable_corpus(const std::filesystem::path& path, std::size_t n, std::uint64_t seed,
                                   std::uint64_t extra_words = 10) {
  const char* labels[] = {"alpha", "beta", "gamma"};
  const char* cues[3][3] = {{"red", "crimson", "scarlet"}, {"blue", "navy", "azure"}, {"green", "olive", "lime"}};
  const char* filler[] = {"the", "a", "message", "about", "some", "thing", "we", "saw", "today", "it", "was", "there"};
  Rng rng(seed);
  std::ofstream out(path);
  out << "label\ttext\n";
  for (std::size_t i = 0; i < n; ++i) {
    const std::uint64_t r = rng.below(10);
    const std::size_t c = r < 4 ? 0 : r < 7 ? 1 : 2;
    const std::size_t len = 4 + rng.below(extra_words);
    const std::size_t cue_at = rng.below(len);
    out << labels[c] << '\t';
    for (std::size_t t = 0; t < len; ++t)
      out << (t ? " " : "") << (t == cue_at ? cues[c][rng.below(3)] : filler[rng.below(12)]);
    out << '\n';
  }
}

}  // namespace gyre::test
