#include "gyre/text/tokenizer.hpp"

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"

namespace gyre::text {

bool tokenize_at(const Tokenizer& tokenizer, std::string_view text, std::string_view path, std::size_t line,
                 std::vector<std::string>& out) {
  try {
    return tokenizer.tokenize(text, out);
  } catch (const runtime::Error& e) {
    throw ParseError(path, line, e.what());
  }
}

void normalize_tokens_at(const Tokenizer& tokenizer, const std::vector<std::string>& tokens,
                         std::string_view path, std::size_t line, std::vector<std::string>& out) {
  out.resize(tokens.size());
  try {
    for (std::size_t i = 0; i < tokens.size(); ++i) out[i] = tokenizer.normalize(tokens[i]);
  } catch (const runtime::Error& e) {
    out.clear();
    throw ParseError(path, line, e.what());
  }
}

}  // namespace gyre::text

namespace gyre::runtime {

void to_json(nlohmann::json& j, const TokenizerSettings& settings) {
  j = nlohmann::json{{"mode", to_string(settings.mode)},
                     {"nfkc", settings.nfkc},
                     {"case_fold", settings.case_fold},
                     {"fold_digits", settings.fold_digits},
                     {"keep_punctuation", settings.keep_punctuation},
                     {"max_tokens", settings.max_tokens}};
}

void from_json(const nlohmann::json& j, TokenizerSettings& settings) {
  if (!j.is_object())
    throw ConfigError("tokenizer", "expected a JSON object, got " + std::string(j.type_name()));
  TokenizerSettings s;
  for (const auto& [key, value] : j.items()) {
    const std::string where = "tokenizer." + key;
    auto boolean = [&]() {
      if (!value.is_boolean()) throw ConfigError(where, "expected true or false, got " + value.dump());
      return value.get<bool>();
    };
    if (key == "mode") {
      if (!value.is_string())
        throw ConfigError(where, "expected \"words\", \"chars\" or \"whitespace\", got " + value.dump());
      try {
        s.mode = tokenizer_mode_from_string(value.get<std::string>());
      } catch (const runtime::Error& e) {
        throw ConfigError(where, e.what());
      }
    } else if (key == "nfkc") {
      s.nfkc = boolean();
    } else if (key == "case_fold") {
      s.case_fold = boolean();
    } else if (key == "fold_digits") {
      s.fold_digits = boolean();
    } else if (key == "keep_punctuation") {
      s.keep_punctuation = boolean();
    } else if (key == "max_tokens") {
      if (!value.is_number_unsigned())
        throw ConfigError(where, "expected a non-negative integer (0 = no limit), got " + value.dump());
      s.max_tokens = value.get<std::size_t>();
    } else {
      throw ConfigError(
          where, "unknown key (expected mode, nfkc, case_fold, fold_digits, keep_punctuation, max_tokens)");
    }
  }
  settings = s;
}

}  // namespace gyre::runtime
