#pragma once
// Reading and writing trained models through the one container format of the runtime
// (docs/model-format.md): training checkpoints ("format": "gyre-checkpoint") and exported models
// ("format": "gyre-model") share the header schema (architecture, labels, tokenizer,
// vocabulary), so an exported file is readable by the embedded runtime and a checkpoint by
// every command of the training library.

#include <filesystem>
#include <memory>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/model/sequence_model.hpp"
#include "gyre/model/spec.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/text/vocab.hpp"

namespace gyre::io {

/// The model part of the header (docs/model-format.md "Model header schema").
nlohmann::json model_header(const model::ModelSpec& spec, const text::VocabFile& vocab);

/// A trained model ready to run in the training library.
struct TrainedModel {
  model::ModelSpec spec;
  text::VocabFile vocab;
  std::unique_ptr<model::SequenceModel> model;
  nlohmann::json header;       // the whole file header
  std::filesystem::path path;  // the file that was read
};

/// Resolves MODEL_OR_RUN: a run directory means its checkpoint-best.bin.
std::filesystem::path resolve_model_path(const std::filesystem::path& model_or_run);

/// Loads a checkpoint or an exported model (f16/i8 tensors are dequantised). Throws FormatError
/// naming the file on anything missing or inconsistent, IoError if it cannot be read.
TrainedModel load_trained_model(const std::filesystem::path& model_or_run);

/// Writes a checkpoint atomically: parameters, optimizer state (if given), the trainer's state
/// and the resolved config.
void write_checkpoint(const std::filesystem::path& path, const model::SequenceModel& model,
                      const text::VocabFile& vocab, optim::Optimizer* optimizer,
                      const nlohmann::json& trainer_state, const nlohmann::json& config);

/// Restores parameters and (if given) optimizer state from a checkpoint into a model of the same
/// spec; returns {"trainer": ..., "config": ...}. Throws FormatError on any mismatch.
nlohmann::json restore_checkpoint(const std::filesystem::path& path, model::SequenceModel& model,
                                  optim::Optimizer* optimizer);

/// Writes the compact model file: matrices (embedding, w_input, w_hidden, head.weight) in the
/// given precision, biases and CRF scores in f32. `extra` is merged into the header (metrics,
/// provenance). Returns the file size in bytes.
std::size_t export_model(const TrainedModel& trained, const std::filesystem::path& out,
                         runtime::DType precision, const nlohmann::json& extra = nlohmann::json::object());

}  // namespace gyre::io
