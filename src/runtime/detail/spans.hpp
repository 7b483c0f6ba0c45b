#pragma once
// Span extraction from BIO/BIOES tags, following the chunk rules of the CoNLL-2000 shared-task
// evaluation: a chunk ends before a token tagged B, S or O or of another type, and after a token
// tagged E or S; an I or E that does not continue a chunk of its own type starts a new chunk.

#include <cstddef>
#include <cstdint>
#include <string>
#include <vector>

#include "gyre/runtime/model.hpp"

namespace gyre::runtime::detail {

/// prefix[tag] in {'B','I','E','S','O'}, type[tag] the span type; spans cleared then filled.
inline void extract_spans(const std::vector<char>& prefix, const std::vector<std::string>& type,
                          const std::uint32_t* tags, std::size_t n, std::vector<TagSpan>& spans) {
  spans.clear();
  bool open = false;
  std::uint32_t begin = 0;
  std::uint32_t open_tag = 0;
  char prev = 'O';
  for (std::uint32_t t = 0; t < n; ++t) {
    const std::uint32_t tag = tags[t];
    const char p = prefix[tag];
    const bool continues = open && type[open_tag] == type[tag] && (p == 'I' || p == 'E') && prev != 'E' && prev != 'S';
    if (open && !continues) {
      spans.push_back({begin, t, type[open_tag], 0, 0});
      open = false;
    }
    if (p != 'O' && !continues) {
      open = true;
      begin = t;
      open_tag = tag;
    }
    prev = p;
  }
  if (open) spans.push_back({begin, static_cast<std::uint32_t>(n), type[open_tag], 0, 0});
}

}  // namespace gyre::runtime::detail
