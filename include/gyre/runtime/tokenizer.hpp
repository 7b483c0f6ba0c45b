#pragma once
// Text normalization and segmentation shared by training and the embedded runtime, so that both
// turn the same text into the same tokens. C++17, standard library only in this header; the
// implementation uses ICU when GYRE_RUNTIME_HAS_ICU is defined (CMake: -DGYRE_RUNTIME_ICU=ON).
//
// Pipeline: validate UTF-8 -> normalize (NFKC, then ICU full case folding, then digit folding)
// -> segment by mode -> drop whitespace (and punctuation if asked) -> cut at max_tokens; on
// request, each token's byte range in the original text (through the normalization's edits).
//   words       ICU word boundaries (Unicode UAX #29 as tailored by CLDR root); segments made only
//               of White_Space are dropped; punctuation-only segments (General_Category P*) are
//               tokens unless keep_punctuation is false.
//   chars       extended grapheme clusters (UAX #29); a run of White_Space clusters becomes one
//               " " token and leading/trailing whitespace is dropped; punctuation clusters are
//               dropped when keep_punctuation is false.
//   whitespace  split on Unicode White_Space (PropList.txt); tokens made only of punctuation are
//               dropped when keep_punctuation is false.
// Without ICU only `whitespace` mode with nfkc, case_fold and fold_digits off and
// keep_punctuation on is available; the constructor throws for anything else.

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/error.hpp"
#include "gyre/runtime/utf8.hpp"

namespace gyre::runtime {

enum class TokenizerMode { kWords, kChars, kWhitespace };

struct TokenizerSettings {
  TokenizerMode mode = TokenizerMode::kWords;
  bool nfkc = true;              // Unicode NFKC (UAX #15)
  bool case_fold = true;         // ICU full case folding (CaseFolding.txt, C + F entries)
  bool fold_digits = false;      // every decimal digit (General_Category Nd) -> '0'
  bool keep_punctuation = true;  // false: drop tokens made only of punctuation (P*)
  std::size_t max_tokens = 0;    // keep the first max_tokens tokens; 0 = no limit

  bool operator==(const TokenizerSettings& o) const {
    return mode == o.mode && nfkc == o.nfkc && case_fold == o.case_fold && fold_digits == o.fold_digits &&
           keep_punctuation == o.keep_punctuation && max_tokens == o.max_tokens;
  }
  bool operator!=(const TokenizerSettings& o) const { return !(*this == o); }
};

/// Where a token came from: bytes [begin, end) of the text given to Tokenizer::tokenize, before
/// any normalization, so text.substr(begin, end - begin) is the user's own spelling of it
/// ("１４" for the token "14", "ﬁx" for "fix"). When NFKC or case folding turned several input
/// characters into one piece of output and a token holds only part of that piece (never for
/// well-formed words), the token gets the bytes of the whole piece.
struct ByteRange {
  std::size_t begin = 0;
  std::size_t end = 0;
};

/// "words", "chars" or "whitespace".
const char* to_string(TokenizerMode mode);
/// Inverse of to_string; throws Error naming the accepted values.
TokenizerMode tokenizer_mode_from_string(std::string_view name);

/// Turns UTF-8 text into tokens. Holds only its settings (per-thread ICU objects are cached
/// internally), so it is cheap to copy and tokenize() may be called concurrently from several
/// threads on one Tokenizer.
class Tokenizer {
 public:
  /// Throws Error when a setting needs ICU and the runtime was built without it.
  explicit Tokenizer(const TokenizerSettings& settings);

  const TokenizerSettings& settings() const { return settings_; }

  /// NFKC, case folding and digit folding as set (no segmentation). Throws Error on invalid UTF-8.
  std::string normalize(std::string_view utf8) const;

  /// Clears out, then appends the tokens of utf8 (normalized, then segmented). Reuses out's
  /// capacity. Returns true when max_tokens cut the text (more tokens followed the last one
  /// kept). Throws Error on invalid UTF-8.
  bool tokenize(std::string_view utf8, std::vector<std::string>& out) const;
  std::vector<std::string> tokenize(std::string_view utf8) const;
  /// The same tokens, and in ranges (cleared first) the bytes of utf8 each one came from:
  /// ranges[i] belongs to out[i], ranges are ascending and do not overlap. In "chars" mode the
  /// " " token standing for a run of whitespace gets the bytes of that run.
  bool tokenize(std::string_view utf8, std::vector<std::string>& out, std::vector<ByteRange>& ranges) const;

 private:
  bool tokenize_into(std::string_view utf8, std::vector<std::string>& out,
                     std::vector<ByteRange>* ranges) const;
  TokenizerSettings settings_;
};

/// Whether this build of the runtime has ICU (words/chars modes, NFKC, case folding).
bool tokenizer_has_icu() noexcept;

}  // namespace gyre::runtime
