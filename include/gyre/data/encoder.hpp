#pragma once
// Encoder: turns corpus examples (or raw text) into token ids and target ids exactly as the
// model was trained: same tokenizer settings, same vocabulary, same label set.

#include <string>
#include <string_view>
#include <vector>

#include "gyre/data/batcher.hpp"
#include "gyre/data/example.hpp"
#include "gyre/data/task.hpp"
#include "gyre/runtime/char_tokens.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "gyre/text/tokenizer.hpp"
#include "gyre/text/vocab.hpp"

namespace gyre::data {

class Encoder {
 public:
  /// Tokenizes with the vocabulary's tokenizer settings, its max_tokens included.
  Encoder(const text::VocabFile& vocab, data::Task task);
  /// Same, but texts (classify) and sentences (tag) are cut at max_tokens instead (0 = no limit):
  /// how `gyre predict --max-tokens` bounds the memory of a model whose settings set no limit.
  Encoder(const text::VocabFile& vocab, data::Task task, std::size_t max_tokens);

  const text::VocabFile& vocab() const noexcept { return *vocab_; }
  data::Task task() const noexcept { return task_; }
  const text::Tokenizer& tokenizer() const noexcept { return tokenizer_; }

  /// The tokens the model sees: classify -> the tokenizer's output on the text; tag -> the
  /// given tokens, each normalized (NFKC/case/digit folding as set). Both stop at max_tokens;
  /// returns true when that cut the example. Throws ParseError naming path and the example's
  /// line on invalid UTF-8.
  bool tokens(const data::Example& example, std::string_view path, std::vector<std::string>& out) const;
  /// Word tokens and their surface forms (un-folded, gyre/runtime/char_tokens.hpp), whether or
  /// not the vocabulary has characters: what a character list is built from.
  bool tokens(const data::Example& example, std::string_view path, std::vector<std::string>& words,
              std::vector<std::string>& surfaces) const;

  /// Ids and targets (a tagging sentence cut at max_tokens keeps the tags of the tokens kept;
  /// EncodedExample::cut tells). Throws ParseError(path, line, ...) for an example with no
  /// tokens after tokenization or a label/tag the model does not know.
  data::EncodedExample encode(const data::Example& example, std::string_view path) const;

  /// Ids of raw text (no targets); may be empty when the text has no tokens. Returns true when
  /// max_tokens cut the text.
  bool encode_text(std::string_view text, std::vector<std::string>& tokens,
                   std::vector<std::int32_t>& ids) const;
  /// Same, and token_bytes[i] = the bytes of text that tokens[i] came from (before normalization).
  bool encode_text(std::string_view text, std::vector<std::string>& tokens, std::vector<std::int32_t>& ids,
                   std::vector<runtime::ByteRange>& token_bytes) const;
  /// Same into an example (ids, and the characters when the model has a character encoder), with
  /// token_bytes as above when given. The ids-only overloads throw for a vocabulary with characters.
  bool encode_text(std::string_view text, std::vector<std::string>& tokens, data::EncodedExample& out,
                   std::vector<runtime::ByteRange>* token_bytes = nullptr) const;

  /// Classifiers with an n-gram part: encode() and encode_text() into an example also fill
  /// EncodedExample::ngram_scores from the tokens (the words the vocabulary sees). The part must
  /// outlive the encoder; nullptr or an empty part: none.
  void set_ngram_part(const runtime::NgramPart* part) noexcept {
    ngram_part_ = part != nullptr && !part->empty() ? part : nullptr;
  }
  const runtime::NgramPart* ngram_part() const noexcept { return ngram_part_; }
  /// Sets out.ngram_scores and out.words from the words (clears them without a part).
  void add_ngram_scores(const std::vector<std::string>& words, data::EncodedExample& out) const;

  /// Whether the vocabulary has a character list (the model a character encoder).
  bool has_characters() const noexcept { return !vocab_->characters.empty(); }
  /// Sets out.char_ids/char_offsets from the surface tokens (has_characters() only).
  void add_characters(const std::vector<std::string>& surfaces, data::EncodedExample& out) const;

 private:
  const text::VocabFile* vocab_;
  data::Task task_;
  text::Tokenizer tokenizer_;
  text::Tokenizer surface_tokenizer_;  // no case or digit folding (gyre/runtime/char_tokens.hpp)
  runtime::CharacterIds character_ids_;
  const runtime::NgramPart* ngram_part_ = nullptr;

  // Surface tokens of an example (classify: segmented from the text; tag: the given tokens).
  bool surface_tokens(const data::Example& example, std::string_view path, std::vector<std::string>& surfaces,
                      std::vector<std::string>& words) const;
};

}  // namespace gyre::data
