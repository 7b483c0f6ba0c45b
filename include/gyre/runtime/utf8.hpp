#pragma once
// UTF-8 well-formedness (RFC 3629; Unicode 15.0 Table 3-7 "Well-Formed UTF-8 Byte Sequences":
// no overlong forms, no surrogates, nothing above U+10FFFF). The one check used by the runtime
// (tokenizer, model-file header and tensor names, C API) and the training library (corpus reader,
// vocabulary, predict). C++17, standard library only.

#include <cstddef>
#include <string_view>

namespace gyre::runtime {

/// 0-based offset of the first byte that makes utf8 ill-formed, or std::string_view::npos when
/// it is well-formed. Messages for people give this offset + 1 ("invalid UTF-8 at byte 3"),
/// counting bytes from 1 like lines and columns.
std::size_t first_invalid_utf8(std::string_view utf8) noexcept;

/// True when utf8 is well-formed.
inline bool is_valid_utf8(std::string_view utf8) noexcept {
  return first_invalid_utf8(utf8) == std::string_view::npos;
}

}  // namespace gyre::runtime
