#pragma once
// Shared by the commands that run a trained model on a labelled file (eval, export).

#include <string>
#include <vector>

#include "gyre/data/batcher.hpp"
#include "gyre/data/example.hpp"
#include "gyre/io/model_io.hpp"

namespace gyre::cli {

struct LabelledData {
  std::vector<data::Example> examples;
  std::vector<data::EncodedExample> encoded;
  std::size_t skipped = 0;
};

/// Reads a labelled file and encodes it with the model's tokenizer, vocabulary and labels.
/// Throws ParseError (file:line) on malformed records, labels the model does not know, or a
/// corpus of the other task.
LabelledData load_labelled(const std::string& path, const io::TrainedModel& trained, bool skip_bad_lines);

}  // namespace gyre::cli
