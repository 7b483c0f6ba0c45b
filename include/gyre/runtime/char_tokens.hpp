#pragma once
// What the character encoder of a model reads (docs/model-format.md "Character encoder"), shared
// by training and the embedded runtime so both give a token the same character ids. C++17,
// standard library only in this header; needs ICU (grapheme clusters) at run time.
//
// A model with a character encoder tokenizes in two steps so that every word token has a
// "surface" form: the text is normalized with NFKC only (as the tokenizer settings say; no case
// or digit folding) and segmented by the tokenizer's mode, which gives the surface tokens; each
// word token is then its surface token normalized with the full settings (case and digit
// folding). The word vocabulary sees the folded token, the character encoder the surface one, so
// capitalisation, digits and word shape survive case folding. Pre-tokenized input (tagging
// corpora) takes each given token as the text of one surface token.
//
// A surface token's characters are its extended grapheme clusters (UAX #29, ICU root locale), the
// first kMaxTokenCharacters of them; each cluster maps to its index in the model's character
// list ("characters": [0] "<pad>", [1] "<unk>", then clusters) or to 1 when absent.

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "gyre/runtime/tokenizer.hpp"

namespace gyre::runtime {

/// Clusters of a token beyond this many are not read by the character encoder (our choice: far
/// above the length of ordinary words, it bounds the cost of long URLs and identifiers).
inline constexpr std::size_t kMaxTokenCharacters = 32;

/// The extended grapheme clusters of utf8 (UAX #29), in order. Throws Error on invalid UTF-8 or
/// when the runtime was built without ICU.
void grapheme_clusters(std::string_view utf8, std::vector<std::string_view>& out);

/// The tokenizer that gives surface tokens: the same settings without case and digit folding.
TokenizerSettings surface_settings(TokenizerSettings settings);

/// Tokenizes text for a model with a character encoder: surface tokens (see above), then words[i]
/// = tokenizer.normalize(surfaces[i]). Returns true when max_tokens cut the text. With `ranges`,
/// (*ranges)[i] = the bytes of text that token i came from (Tokenizer::tokenize's ranges of the
/// surface tokens; folding a surface token keeps it one token).
bool tokenize_with_surface(const Tokenizer& tokenizer, const Tokenizer& surface_tokenizer,
                           std::string_view text, std::vector<std::string>& words,
                           std::vector<std::string>& surfaces, std::vector<ByteRange>* ranges = nullptr);

/// Character list of a model: cluster -> id.
class CharacterIds {
 public:
  CharacterIds() = default;
  /// characters[0] and [1] are the padding and unknown entries (never looked up).
  explicit CharacterIds(const std::vector<std::string>& characters);
  std::size_t size() const noexcept { return size_; }
  /// Appends the ids of the token's clusters (at most kMaxTokenCharacters; 1 for an unknown
  /// cluster) to out. A token with no clusters (empty) appends nothing. `clusters` is scratch
  /// space (reused), so one CharacterIds serves any number of threads.
  void append_ids(std::string_view surface_token, std::vector<std::int32_t>& out,
                  std::vector<std::string_view>& clusters) const;

 private:
  std::unordered_map<std::string, std::int32_t> ids_;
  std::size_t size_ = 0;
};

}  // namespace gyre::runtime
