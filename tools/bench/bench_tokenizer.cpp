// Tokenizer throughput on one core: `words` mode with NFKC + case folding against a plain
// whitespace split, on the same generated mixed-script text, in one run.
//
//   bench_tokenizer [megabytes=50] [seed=7]
//
// The text is made in memory from a fixed seed: lines of 5-40 words, ~60% Latin-script words
// (capitalised, digits, punctuation, some accents and ligatures), the rest Cyrillic, Greek, Arabic,
// Devanagari, Han/Kana and emoji, so the ASCII shortcut applies only to some lines.

#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <ctime>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/core/rng.hpp"
#include "gyre/runtime/tokenizer.hpp"

namespace {

using gyre::runtime::Tokenizer;
using gyre::runtime::TokenizerMode;
using gyre::runtime::TokenizerSettings;

// Invented word pieces per script (not real data; only the code points matter).
const std::vector<std::string_view> kLatin = {
    "kettle", "Coil", "repair", "booked", "Tuesday", "part", "warranty", "the",   "a",     "is", "it's",
    "don't",  "NOT",  "ok",     "café",   "naïve",   "ﬁxed", "Straße",   "model", "X-200", "3.5"};
const std::vector<std::string_view> kOther = {
    "привет", "ремонт", "Чайник", "καλημέρα", "ΒΛΑΒΗ",    "مرحبا", "إصلاح",       "नमस्ते", "मरम्मत",
    "修理",   "予約",   "ケトル", "ｶﾀｶﾅ",     "ＡＢＣ１", "😀",     "👩‍🔧", "①②",   "Ⅻ"};
const std::vector<std::string_view> kPunct = {",", ".", "!", "?", " -", ":", ";", " (ok)", "\"", "…"};

std::string make_text(std::size_t bytes, std::uint64_t seed, std::vector<std::string_view>& lines) {
  gyre::Rng rng(seed);
  std::string text;
  text.reserve(bytes + 1024);
  std::vector<std::size_t> ends;
  while (text.size() < bytes) {
    const bool ascii_line = rng.below(2) == 0;
    const auto words = 5 + rng.below(36);
    for (std::uint64_t w = 0; w < words; ++w) {
      if (w) text += ' ';
      const bool other = !ascii_line && rng.below(5) < 2;
      const auto& pool = other ? kOther : kLatin;
      std::string_view word = pool[rng.below(pool.size())];
      if (ascii_line) {  // keep these lines pure ASCII
        auto non_ascii = [](std::string_view s) {
          for (char c : s)
            if (static_cast<unsigned char>(c) >= 0x80) return true;
          return false;
        };
        while (non_ascii(word)) word = pool[rng.below(pool.size())];
      }
      text += word;
      if (rng.below(4) == 0) text += std::to_string(rng.below(2000));
      if (rng.below(6) == 0) text += kPunct[rng.below(ascii_line ? 9 : kPunct.size())];
    }
    text += '\n';
    ends.push_back(text.size());
  }
  std::size_t start = 0;
  for (std::size_t end : ends) {
    lines.emplace_back(text.data() + start, end - 1 - start);
    start = end;
  }
  return text;
}

// CPU time of this thread: the machine may be shared, and wall time would then count other work.
double thread_cpu_seconds() {
  timespec ts{};
  clock_gettime(CLOCK_THREAD_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + 1e-9 * static_cast<double>(ts.tv_nsec);
}

struct Result {
  double seconds = 0;  // thread CPU time
  double wall_seconds = 0;
  std::size_t tokens = 0;
};

Result run(const Tokenizer& tok, const std::vector<std::string_view>& lines) {
  std::vector<std::string> out;
  Result r;
  const auto t0 = std::chrono::steady_clock::now();
  const double c0 = thread_cpu_seconds();
  for (auto line : lines) {
    tok.tokenize(line, out);
    r.tokens += out.size();
  }
  r.seconds = thread_cpu_seconds() - c0;
  r.wall_seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return r;
}

}  // namespace

int main(int argc, char** argv) {
  const double megabytes = argc > 1 ? std::atof(argv[1]) : 50.0;
  const std::uint64_t seed = argc > 2 ? std::strtoull(argv[2], nullptr, 10) : 7;
  if (!(megabytes > 0)) {
    std::fprintf(stderr, "usage: bench_tokenizer [megabytes=50] [seed=7]\n");
    return 2;
  }
  std::vector<std::string_view> lines;
  const std::string text = make_text(static_cast<std::size_t>(megabytes * 1e6), seed, lines);
  const double mb = static_cast<double>(text.size()) / 1e6;
  std::printf("text: %.1f MB, %zu lines, seed %llu\n", mb, lines.size(),
              static_cast<unsigned long long>(seed));

  TokenizerSettings words;  // defaults: words + NFKC + case folding, punctuation kept
  TokenizerSettings plain;
  plain.mode = TokenizerMode::kWhitespace;
  plain.nfkc = false;
  plain.case_fold = false;

  const Tokenizer words_tok(words), plain_tok(plain);
  run(words_tok, std::vector<std::string_view>(lines.begin(),
                                               lines.begin() + std::min<std::size_t>(lines.size(), 1000)));
  const Result w = run(words_tok, lines);
  const Result p = run(plain_tok, lines);
  const double w_mbs = mb / w.seconds, p_mbs = mb / p.seconds;
  std::printf("MB/s per core (thread CPU time; wall-clock MB/s in brackets)\n");
  std::printf("words + NFKC + case fold: %8.1f MB/s  [%6.1f]  (%zu tokens, %.2f s CPU)\n", w_mbs,
              mb / w.wall_seconds, w.tokens, w.seconds);
  std::printf("whitespace split:         %8.1f MB/s  [%6.1f]  (%zu tokens, %.2f s CPU)\n", p_mbs,
              mb / p.wall_seconds, p.tokens, p.seconds);
  std::printf("ratio whitespace/words:   %8.2f\n", p_mbs / w_mbs);
  std::printf("target >= 10 MB/s for words: %s\n", w_mbs >= 10.0 ? "met" : "NOT met");
  return 0;
}
