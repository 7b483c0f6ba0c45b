#include "cli/model_data.hpp"

#include <iostream>

#include "gyre/core/error.hpp"
#include "gyre/data/encoder.hpp"
#include "gyre/data/reader.hpp"

namespace gyre::cli {

data::ReadOptions model_read_options(const io::TrainedModel& trained, const nlohmann::json& given) {
  const nlohmann::json saved =
      trained.header.contains("config") ? trained.header["config"] : nlohmann::json::object();
  auto pick = [&](const char* key, const std::string& fallback) {
    if (given.contains(key)) return given[key].get<std::string>();
    if (saved.contains(key) && saved[key].is_string()) return saved[key].get<std::string>();
    return fallback;
  };
  data::ReadOptions options;
  options.text_column = pick("text_column", options.text_column);
  options.label_column = pick("label_column", options.label_column);
  options.skip_bad_lines = given.value("skip_bad_lines", false);
  return options;
}

LabelledData load_labelled(const std::string& path, const io::TrainedModel& trained,
                           const data::ReadOptions& options) {
  LabelledData out;
  const data::ReadReport report =
      data::read_corpus(path, options, [&](data::Example&& ex) { out.examples.push_back(std::move(ex)); });
  if (report.task != trained.spec.task)
    throw ParseError(path, 0,
                     std::string("is a ") + data::to_string(report.task) + " corpus but the model is a " +
                         data::to_string(trained.spec.task) + " model");
  if (report.skipped > 0) {
    std::cerr << "gyre: warning: " << path << ": skipped " << report.skipped << " bad record(s) (lines";
    for (const auto line : report.first_skipped_lines) std::cerr << ' ' << line;
    std::cerr << (report.skipped > report.first_skipped_lines.size() ? " ...)\n" : ")\n");
  }
  if (out.examples.empty()) throw ParseError(path, 0, "no examples in the file");
  out.skipped = report.skipped;
  data::Encoder encoder(trained.vocab, trained.spec.task);
  encoder.set_ngram_part(&trained.ngram_part);
  out.encoded.reserve(out.examples.size());
  std::vector<std::size_t> cut_lines;
  for (const auto& ex : out.examples) {
    out.encoded.push_back(encoder.encode(ex, path));
    if (out.encoded.back().cut) cut_lines.push_back(ex.line);
    if (!trained.ngram_part.empty()) {  // the same tokens encode() made, as words
      std::vector<std::string> words;
      data::EncodedExample again;
      encoder.encode_text(ex.text, words, again);
      out.words.push_back(std::move(words));
    }
  }
  if (!cut_lines.empty()) {
    const std::size_t cap = trained.vocab.tokenizer.max_tokens;
    std::cerr << "gyre: warning: " << path << ": " << cut_lines.size()
              << " example(s) longer than the model's max_tokens (" << cap << ") were scored on their first "
              << cap << " tokens (line" << (cut_lines.size() > 1 ? "s" : "");
    for (std::size_t i = 0; i < cut_lines.size() && i < 10; ++i)
      std::cerr << (i ? ", " : " ") << cut_lines[i];
    std::cerr << (cut_lines.size() > 10 ? ", ...)\n" : ")\n");
  }
  return out;
}

}  // namespace gyre::cli
