#include "cli/model_data.hpp"

#include <iostream>

#include "gyre/core/error.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/model/encoder.hpp"

namespace gyre::cli {

LabelledData load_labelled(const std::string& path, const io::TrainedModel& trained, bool skip_bad_lines) {
  LabelledData out;
  data::ReadOptions options;
  options.skip_bad_lines = skip_bad_lines;
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
  const model::Encoder encoder(trained.vocab, trained.spec.task);
  out.encoded.reserve(out.examples.size());
  for (const auto& ex : out.examples) out.encoded.push_back(encoder.encode(ex, path));
  return out;
}

}  // namespace gyre::cli
