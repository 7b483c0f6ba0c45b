#pragma once
// Token embedding "<name>.vectors" [V x E] with sparse row gradients: backward touches only the rows
// of ids seen in the batch and records them in Parameter::touched_rows. Row 0 is padding: its
// output is always the zero vector and it never receives gradient. Row 1 is the unknown token.

#include <cstdint>
#include <functional>
#include <span>
#include <string>
#include <string_view>

#include "gyre/core/rng.hpp"
#include "gyre/nn/parameter.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

struct PretrainedStats {
  std::size_t lines = 0;    // vector lines read (header excluded)
  std::size_t matched = 0;  // rows of the table overwritten (tokens found by the lookup)
};

class Embedding {
 public:
  Embedding(ParameterStore& store, int vocab_size, int dim, const std::string& name = "tokens");

  /// N(0, 1) * 0.1 (common practice, no source), padding row 0 zero.
  void init_parameters(Rng& rng);
  int vocab_size() const noexcept { return static_cast<int>(weight_.value.rows()); }
  int dim() const noexcept { return static_cast<int>(weight_.value.cols()); }
  Parameter& weight() noexcept { return weight_; }
  /// Frozen embeddings (trainable = false) skip backward entirely.
  void set_trainable(bool trainable) noexcept { weight_.trainable = trainable; }
  bool trainable() const noexcept { return weight_.trainable; }

  /// ids: time-major [T*B] (any flat layout), each in [0, V). out: [ids.size() x E]. The ids are
  /// copied for backward. Throws gyre::Error on an id out of range.
  void forward(std::span<const std::int32_t> ids, Matrix& out);
  /// Same into a view the caller has shaped [ids.size() x E] (e.g. a MatrixBuffer's).
  void forward(std::span<const std::int32_t> ids, Eigen::Ref<Matrix> out);
  /// d_out: [N x E] for the ids of the last forward. Adds into weight.grad rows and appends the
  /// touched row ids to weight.touched_rows (call finalize_touched_rows() before an update).
  void backward(Eigen::Ref<const Matrix> d_out);

  /// Loads a whitespace-separated text vector file, one "token v1 ... vE" per line (an optional
  /// first line "count dim" is accepted and checked). lookup(token) returns the row id or -1 for
  /// tokens outside the vocabulary (those lines are counted in stats.lines but not used; the
  /// padding row 0 is never overwritten). Throws gyre::ParseError "path:line: ..." for a wrong
  /// number of values or a bad number, gyre::IoError if the file cannot be read.
  PretrainedStats load_pretrained(const std::string& path,
                                  const std::function<int(std::string_view)>& lookup);

 private:
  Parameter& weight_;
  std::vector<std::int32_t> ids_;
};

}  // namespace gyre::nn
