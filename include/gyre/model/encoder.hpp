#pragma once
// Encoder: turns corpus examples (or raw text) into token ids and target ids exactly as the
// model was trained: same tokenizer settings, same vocabulary, same label set.

#include <string>
#include <string_view>
#include <vector>

#include "gyre/data/batcher.hpp"
#include "gyre/data/example.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/text/vocab.hpp"

namespace gyre::model {

class Encoder {
 public:
  Encoder(const text::VocabFile& vocab, data::Task task);

  const text::VocabFile& vocab() const noexcept { return *vocab_; }
  data::Task task() const noexcept { return task_; }
  const text::Tokenizer& tokenizer() const noexcept { return tokenizer_; }

  /// The tokens the model sees: classify -> the tokenizer's output on the text; tag -> the
  /// given tokens, each normalized (NFKC/case/digit folding as set). Throws ParseError naming
  /// path and the example's line on invalid UTF-8.
  void tokens(const data::Example& example, std::string_view path, std::vector<std::string>& out) const;

  /// Ids and targets. Throws ParseError(path, line, ...) for an example with no tokens after
  /// tokenization or a label/tag the model does not know.
  data::EncodedExample encode(const data::Example& example, std::string_view path) const;

  /// Ids of raw text (no targets); may be empty when the text has no tokens.
  void encode_text(std::string_view text, std::vector<std::string>& tokens,
                   std::vector<std::int32_t>& ids) const;

 private:
  const text::VocabFile* vocab_;
  data::Task task_;
  text::Tokenizer tokenizer_;
};

}  // namespace gyre::model
