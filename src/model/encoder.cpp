#include "gyre/model/encoder.hpp"

#include "gyre/core/error.hpp"
#include "gyre/runtime/error.hpp"

namespace gyre::model {

Encoder::Encoder(const text::VocabFile& vocab, data::Task task)
    : vocab_(&vocab), task_(task), tokenizer_(vocab.tokenizer) {}

void Encoder::tokens(const data::Example& example, std::string_view path,
                     std::vector<std::string>& out) const {
  if (task_ == data::Task::kClassify) {
    text::tokenize_at(tokenizer_, example.text, path, example.line, out);
    return;
  }
  out.clear();
  out.reserve(example.tokens.size());
  try {
    for (const auto& token : example.tokens) out.push_back(tokenizer_.normalize(token));
  } catch (const runtime::Error& e) {
    throw ParseError(path, example.line, e.what());
  }
}

data::EncodedExample Encoder::encode(const data::Example& example, std::string_view path) const {
  data::EncodedExample out;
  out.source_line = example.line;
  std::vector<std::string> toks;
  tokens(example, path, toks);
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
    for (const auto& tag : example.tags) out.targets.push_back(vocab_->labels.id(tag, path, example.line));
  }
  return out;
}

void Encoder::encode_text(std::string_view text, std::vector<std::string>& toks,
                          std::vector<std::int32_t>& ids) const {
  tokenizer_.tokenize(text, toks);
  ids.clear();
  ids.reserve(toks.size());
  for (const auto& t : toks) ids.push_back(vocab_->vocab.id(t));
}

}  // namespace gyre::model
