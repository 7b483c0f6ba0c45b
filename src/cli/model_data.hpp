#pragma once
// Shared by the commands that run a trained model on a labelled file (eval, export).

#include <string>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/data/batcher.hpp"
#include "gyre/data/example.hpp"
#include "gyre/data/reader.hpp"
#include "gyre/io/model_io.hpp"

namespace gyre::cli {

struct LabelledData {
  std::vector<data::Example> examples;
  std::vector<data::EncodedExample> encoded;
  /// A model with an n-gram part: the words of each example (train::predict_all needs them).
  std::vector<std::vector<std::string>> words;
  std::size_t skipped = 0;
};

/// How to read labelled files for a model: the CSV columns / JSON Lines keys and the bad-line
/// policy given on the command line (`given`, by setting key), else those the model was trained
/// with (its saved config), else the defaults.
data::ReadOptions model_read_options(const io::TrainedModel& trained, const nlohmann::json& given);

/// Reads a labelled file and encodes it with the model's tokenizer, vocabulary and labels.
/// Throws ParseError (file:line) on malformed records, labels the model does not know, or a
/// corpus of the other task.
LabelledData load_labelled(const std::string& path, const io::TrainedModel& trained,
                           const data::ReadOptions& options);

}  // namespace gyre::cli
