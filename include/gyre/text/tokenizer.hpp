#pragma once
// The tokenizer of the training library is the runtime's (include/gyre/runtime/tokenizer.hpp),
// re-exported here with JSON conversion of its settings and a helper that reports bad text as
// gyre::ParseError with file and line.
//
// JSON form of TokenizerSettings (also read by the runtime; see DEVELOPERS.md "Tokenizer keys"):
//   {"mode": "words"|"chars"|"whitespace", "nfkc": bool, "case_fold": bool,
//    "fold_digits": bool, "keep_punctuation": bool, "max_tokens": unsigned integer}
// Every key is optional on input (missing keys keep their defaults); unknown keys are refused.

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "gyre/runtime/tokenizer.hpp"

namespace gyre::text {

/// Default cap on tokens per text for training (the `max_tokens` setting) and for `gyre predict`
/// on a model whose settings set none: memory then depends on settings, not on the longest line
/// of the input. 1000 tokens is well above the demo corpora's longest text (79) and typical
/// messages and reviews (common practice, no source).
inline constexpr std::size_t kDefaultMaxTokens = 1000;

using runtime::is_valid_utf8;
using runtime::to_string;
using runtime::Tokenizer;
using runtime::tokenizer_mode_from_string;
using runtime::TokenizerMode;
using runtime::TokenizerSettings;

/// tokenizer.tokenize(text, out) (true when max_tokens cut the text), but a runtime::Error
/// (invalid UTF-8 ...) becomes gyre::ParseError("path:line: ...").
bool tokenize_at(const Tokenizer& tokenizer, std::string_view text, std::string_view path, std::size_t line,
                 std::vector<std::string>& out);

/// Pre-tokenized input (tagging corpora): normalizes each given token (NFKC, case and digit
/// folding as set) without segmenting it again, so out.size() == tokens.size(); max_tokens does
/// not apply (tags need one token each). A runtime::Error becomes gyre::ParseError(path, line).
void normalize_tokens_at(const Tokenizer& tokenizer, const std::vector<std::string>& tokens,
                         std::string_view path, std::size_t line, std::vector<std::string>& out);

}  // namespace gyre::text

namespace gyre::runtime {
// Found by ADL for nlohmann::json; from_json throws gyre::ConfigError naming the bad key.
void to_json(nlohmann::json& j, const TokenizerSettings& settings);
void from_json(const nlohmann::json& j, TokenizerSettings& settings);
}  // namespace gyre::runtime
