#pragma once
// Reading and writing trained models through the one container format of the runtime
// (docs/model-format.md): training checkpoints ("format": "gyre-checkpoint") and exported models
// ("format": "gyre-model") share the header schema (architecture, labels, tokenizer,
// vocabulary), so an exported file is readable by the embedded runtime and a checkpoint by
// every command of the training library.

#include <filesystem>
#include <memory>
#include <optional>
#include <string>

#include <nlohmann/json.hpp>

#include "gyre/model/sequence_model.hpp"
#include "gyre/model/spec.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "gyre/text/vocab.hpp"

namespace gyre::io {

/// The model part of the header (docs/model-format.md "Model header schema"), with the n-gram
/// part's description (architecture.ngram) when one is given and not empty.
nlohmann::json model_header(const model::ModelSpec& spec, const text::VocabFile& vocab,
                            const runtime::NgramPart* ngram_part = nullptr);

/// A trained model, ready to run in the training library or (exported files) the runtime.
struct TrainedModel {
  model::ModelSpec spec;
  text::VocabFile vocab;
  std::unique_ptr<model::SequenceModel> model;  // null when loaded for the runtime only
  std::optional<runtime::Model> runtime;        // exported files with Engine::kRuntimeForExported
  /// The n-gram part (single-label classifiers; docs/model-format.md "N-gram part"): empty when
  /// the file has none. Its scores are added to the network's logits before the softmax and the
  /// temperature (runtime::NgramPart::add_scores). Read from checkpoints and exported files (the
  /// runtime of an exported file holds its own copy and applies it itself).
  runtime::NgramPart ngram_part;
  nlohmann::json header;       // the whole file header
  std::filesystem::path path;  // the file that was read

  /// An exported model file ("format": "gyre-model"), not a training checkpoint.
  bool exported() const;
};

/// What runs a loaded model. Commands that score a file use kRuntimeForExported, so that what they
/// print for an exported (f16, int8) file is what an application linking gyre::runtime gets.
enum class Engine {
  kLibrary,             // the training library's SequenceModel (f16/i8 weights dequantised)
  kRuntimeForExported,  // exported files: runtime::Model only; checkpoints: the library
};

/// The two checkpoints of a run directory: the one of the epoch with the best dev score (what
/// eval, predict and export use) and the latest one with the optimizer state (what resume
/// continues from). Model-format version 1 called them checkpoint-best.bin / checkpoint-last.bin.
inline constexpr const char* kSelectedCheckpointFile = "selected.bin";
inline constexpr const char* kResumeCheckpointFile = "resume.bin";

/// Resolves MODEL_OR_RUN: a run directory means its selected.bin. A run directory written by a
/// gyre of model-format version 1 is refused with a message saying to retrain.
std::filesystem::path resolve_model_path(const std::filesystem::path& model_or_run);

/// Throws IoError when DIR holds the checkpoints of a format-version-1 run (old file names) but
/// not the current ones; a no-op otherwise.
void refuse_version1_run(const std::filesystem::path& dir);

/// Loads a checkpoint or an exported model. The header is read and validated by the runtime's
/// one reader (runtime::parse_model_header), and every tensor the architecture needs is checked
/// before anything is allocated from the header's sizes. Throws FormatError naming the file on
/// anything missing or inconsistent, IoError if it cannot be read.
TrainedModel load_trained_model(const std::filesystem::path& model_or_run, Engine engine = Engine::kLibrary);

/// Replaces a multi-label model's decision thresholds (its global one and any tuned per label)
/// by `threshold` for every label, in spec and, when loaded, the library model (eval and predict
/// --multi-label-threshold; runtime predictions are re-decided with train::decide_labels).
/// Throws ConfigError("multi_label_threshold", ...) for a model that is not multi-label.
void set_multi_label_threshold(TrainedModel& trained, float threshold);

/// Writes a checkpoint atomically: parameters, optimizer state (if given), the trainer's state,
/// the resolved config and the n-gram part (if given and not empty; f32).
void write_checkpoint(const std::filesystem::path& path, const model::SequenceModel& model,
                      const text::VocabFile& vocab, optim::Optimizer* optimizer,
                      const nlohmann::json& trainer_state, const nlohmann::json& config,
                      const runtime::NgramPart* ngram_part = nullptr);

/// Restores parameters and (if given) optimizer state from a checkpoint into a model of the same
/// spec; returns {"trainer": ..., "config": ...}. Throws FormatError on any mismatch.
nlohmann::json restore_checkpoint(const std::filesystem::path& path, model::SequenceModel& model,
                                  optim::Optimizer* optimizer);

/// Writes the compact model file: matrices (embedding, w_input, w_hidden, readout.w, the n-gram
/// part's weights) in the given precision, biases and CRF scores in f32; trained.ngram_part when
/// it is not empty. `extra` is merged into the header (metrics,
/// provenance). Returns the file size in bytes.
std::size_t export_model(const TrainedModel& trained, const std::filesystem::path& out,
                         runtime::DType precision, const nlohmann::json& extra = nlohmann::json::object());

}  // namespace gyre::io
