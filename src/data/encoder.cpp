#include "gyre/data/encoder.hpp"

#include <algorithm>

#include "gyre/core/error.hpp"
#include "gyre/runtime/error.hpp"

namespace gyre::data {

namespace {
text::TokenizerSettings with_max_tokens(text::TokenizerSettings settings, std::size_t max_tokens) {
  settings.max_tokens = max_tokens;
  return settings;
}
}  // namespace

Encoder::Encoder(const text::VocabFile& vocab, data::Task task)
    : Encoder(vocab, task, vocab.tokenizer.max_tokens) {}

Encoder::Encoder(const text::VocabFile& vocab, data::Task task, std::size_t max_tokens)
    : vocab_(&vocab),
      task_(task),
      tokenizer_(with_max_tokens(vocab.tokenizer, max_tokens)),
      surface_tokenizer_(runtime::surface_settings(with_max_tokens(vocab.tokenizer, max_tokens))),
      character_ids_(vocab.characters) {}

bool Encoder::surface_tokens(const data::Example& example, std::string_view path,
                             std::vector<std::string>& surfaces, std::vector<std::string>& words) const {
  try {
    if (task_ == data::Task::kClassify)
      return runtime::tokenize_with_surface(tokenizer_, surface_tokenizer_, example.text, words, surfaces);
    const std::size_t limit = tokenizer_.settings().max_tokens;
    const std::size_t keep = limit == 0 ? example.tokens.size() : std::min(limit, example.tokens.size());
    surfaces.resize(keep);
    words.resize(keep);
    for (std::size_t i = 0; i < keep; ++i) {
      surfaces[i] = surface_tokenizer_.normalize(example.tokens[i]);
      words[i] = tokenizer_.normalize(example.tokens[i]);
    }
    return keep < example.tokens.size();
  } catch (const runtime::Error& e) {
    throw ParseError(path, example.line, e.what());
  }
}

bool Encoder::tokens(const data::Example& example, std::string_view path, std::vector<std::string>& words,
                     std::vector<std::string>& surfaces) const {
  return surface_tokens(example, path, surfaces, words);
}

void Encoder::add_characters(const std::vector<std::string>& surfaces, data::EncodedExample& out) const {
  out.char_ids.clear();
  out.char_offsets.assign(1, 0);
  std::vector<std::string_view> scratch;
  for (const auto& s : surfaces) {
    character_ids_.append_ids(s, out.char_ids, scratch);
    out.char_offsets.push_back(static_cast<std::int32_t>(out.char_ids.size()));
  }
}

bool Encoder::tokens(const data::Example& example, std::string_view path,
                     std::vector<std::string>& out) const {
  if (has_characters()) {
    std::vector<std::string> surfaces;
    return surface_tokens(example, path, surfaces, out);
  }
  if (task_ == data::Task::kClassify)
    return text::tokenize_at(tokenizer_, example.text, path, example.line, out);
  const std::size_t limit = tokenizer_.settings().max_tokens;
  const std::size_t keep = limit == 0 ? example.tokens.size() : std::min(limit, example.tokens.size());
  out.clear();
  out.reserve(keep);
  try {
    for (std::size_t i = 0; i < keep; ++i) out.push_back(tokenizer_.normalize(example.tokens[i]));
  } catch (const runtime::Error& e) {
    throw ParseError(path, example.line, e.what());
  }
  return keep < example.tokens.size();
}

data::EncodedExample Encoder::encode(const data::Example& example, std::string_view path) const {
  data::EncodedExample out;
  out.source_line = example.line;
  std::vector<std::string> toks, surfaces;
  out.cut = has_characters() ? surface_tokens(example, path, surfaces, toks) : tokens(example, path, toks);
  if (toks.empty())
    throw ParseError(path, example.line,
                     "the text has no tokens after tokenization (check --tokenizer and --drop-punctuation)");
  out.ids.reserve(toks.size());
  for (const auto& t : toks) out.ids.push_back(vocab_->vocab.id(t));
  if (task_ == data::Task::kClassify) {
    if (example.labels.empty()) throw ParseError(path, example.line, "the example has no label");
    for (const auto& label : example.labels)
      out.targets.push_back(vocab_->labels.id(label, path, example.line));
  } else {
    if (example.tags.size() != example.tokens.size())
      throw ParseError(path, example.line, "tokens and tags differ in length");
    for (std::size_t i = 0; i < toks.size(); ++i)
      out.targets.push_back(vocab_->labels.id(example.tags[i], path, example.line));
  }
  if (has_characters()) {
    try {
      add_characters(surfaces, out);
    } catch (const runtime::Error& e) {
      throw ParseError(path, example.line, e.what());
    }
  }
  add_ngram_scores(toks, out);
  return out;
}

void Encoder::add_ngram_scores(const std::vector<std::string>& words, data::EncodedExample& out) const {
  out.ngram_scores.clear();
  out.words.clear();
  if (ngram_part_ == nullptr) return;
  out.words = words;
  out.ngram_scores.assign(static_cast<std::size_t>(ngram_part_->classes()), 0.0F);
  runtime::NgramScratch scratch;
  ngram_part_->add_scores(words, out.ngram_scores.data(), scratch);
}

bool Encoder::encode_text(std::string_view text, std::vector<std::string>& toks, data::EncodedExample& out,
                          std::vector<runtime::ByteRange>* token_bytes) const {
  if (!has_characters()) {
    const bool cut =
        token_bytes ? encode_text(text, toks, out.ids, *token_bytes) : encode_text(text, toks, out.ids);
    add_ngram_scores(toks, out);
    return cut;
  }
  std::vector<std::string> surfaces;
  const bool cut =
      runtime::tokenize_with_surface(tokenizer_, surface_tokenizer_, text, toks, surfaces, token_bytes);
  out.ids.clear();
  for (const auto& t : toks) out.ids.push_back(vocab_->vocab.id(t));
  add_characters(surfaces, out);
  add_ngram_scores(toks, out);
  return cut;
}

bool Encoder::encode_text(std::string_view text, std::vector<std::string>& toks,
                          std::vector<std::int32_t>& ids) const {
  GYRE_CHECK(!has_characters(), "encode_text: a model with a character encoder needs the characters too");
  const bool cut = tokenizer_.tokenize(text, toks);
  ids.clear();
  ids.reserve(toks.size());
  for (const auto& t : toks) ids.push_back(vocab_->vocab.id(t));
  return cut;
}

bool Encoder::encode_text(std::string_view text, std::vector<std::string>& toks,
                          std::vector<std::int32_t>& ids,
                          std::vector<runtime::ByteRange>& token_bytes) const {
  GYRE_CHECK(!has_characters(), "encode_text: a model with a character encoder needs the characters too");
  const bool cut = tokenizer_.tokenize(text, toks, token_bytes);
  ids.clear();
  ids.reserve(toks.size());
  for (const auto& t : toks) ids.push_back(vocab_->vocab.id(t));
  return cut;
}

}  // namespace gyre::data
