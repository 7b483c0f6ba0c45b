#pragma once
// Internals of the runtime tokenizer that tests check directly against the Unicode test files.

#include <cstddef>
#include <string_view>
#include <vector>

namespace gyre::runtime::detail {

enum class BreakKind { kWord, kGrapheme };

/// Byte offsets of every boundary in utf8 as ICU's root-locale break iterator finds it (UAX #29
/// as tailored by CLDR), with no normalization: 0 and utf8.size() are included when utf8 is not
/// empty. Throws runtime::Error on invalid UTF-8 or when built without ICU.
std::vector<std::size_t> break_boundaries(std::string_view utf8, BreakKind kind);

/// Unicode White_Space property (PropList.txt, unchanged since Unicode 6.0).
constexpr bool is_white_space(char32_t c) noexcept {
  return (c >= 0x09 && c <= 0x0D) || c == 0x20 || c == 0x85 || c == 0xA0 || c == 0x1680 ||
         (c >= 0x2000 && c <= 0x200A) || c == 0x2028 || c == 0x2029 || c == 0x202F || c == 0x205F ||
         c == 0x3000;
}

}  // namespace gyre::runtime::detail
