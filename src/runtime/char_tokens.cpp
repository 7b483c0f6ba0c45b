#include "gyre/runtime/char_tokens.hpp"

#include "runtime/detail/segment.hpp"

namespace gyre::runtime {

void grapheme_clusters(std::string_view utf8, std::vector<std::string_view>& out) {
  out.clear();
  const std::vector<std::size_t> b = detail::break_boundaries(utf8, detail::BreakKind::kGrapheme);
  for (std::size_t i = 1; i < b.size(); ++i) out.push_back(utf8.substr(b[i - 1], b[i] - b[i - 1]));
}

TokenizerSettings surface_settings(TokenizerSettings settings) {
  settings.case_fold = false;
  settings.fold_digits = false;
  return settings;
}

bool tokenize_with_surface(const Tokenizer& tokenizer, const Tokenizer& surface_tokenizer,
                           std::string_view text, std::vector<std::string>& words,
                           std::vector<std::string>& surfaces, std::vector<ByteRange>* ranges) {
  const bool cut = ranges ? surface_tokenizer.tokenize(text, surfaces, *ranges)
                          : surface_tokenizer.tokenize(text, surfaces);
  words.resize(surfaces.size());
  for (std::size_t i = 0; i < surfaces.size(); ++i) words[i] = tokenizer.normalize(surfaces[i]);
  return cut;
}

CharacterIds::CharacterIds(const std::vector<std::string>& characters) : size_(characters.size()) {
  ids_.reserve(characters.size());
  for (std::size_t i = 2; i < characters.size(); ++i)
    ids_.emplace(characters[i], static_cast<std::int32_t>(i));
}

void CharacterIds::append_ids(std::string_view surface_token, std::vector<std::int32_t>& out,
                              std::vector<std::string_view>& clusters) const {
  grapheme_clusters(surface_token, clusters);
  const std::size_t n = clusters.size() < kMaxTokenCharacters ? clusters.size() : kMaxTokenCharacters;
  for (std::size_t i = 0; i < n; ++i) {
    const auto it = ids_.find(std::string(clusters[i]));
    out.push_back(it == ids_.end() ? 1 : it->second);
  }
}

}  // namespace gyre::runtime
