#pragma once
// Named trainable tensors with their gradients. Layers register parameters here when they are
// built; optimizers, clipping, checkpoints and the exporter iterate over the store in
// registration order (which is therefore part of the checkpoint format: keep it deterministic).

#include <cstddef>
#include <cstdint>
#include <deque>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

struct Parameter {
  std::string name;  // e.g. "rnn.l0.fwd.w_input"; see DEVELOPERS.md "Tensor names"
  Matrix value;      // [rows x cols]; a bias is [1 x n]
  Matrix grad;       // same shape as value, accumulated by backward passes
  bool trainable = true;
  /// Sparse-row gradient (embeddings): only rows listed in touched_rows are non-zero in grad,
  /// and optimizers may update only those rows. touched_rows is sorted and unique after
  /// finalize_touched_rows().
  bool sparse_rows = false;
  std::vector<std::int32_t> touched_rows;

  std::size_t size() const noexcept { return static_cast<std::size_t>(value.size()); }
  void finalize_touched_rows();
};

class ParameterStore {
 public:
  /// Registers a zero-initialised parameter. Throws gyre::Error if the name is taken.
  /// References stay valid for the store's lifetime (deque storage).
  Parameter& add(std::string name, Eigen::Index rows, Eigen::Index cols, bool sparse_rows = false);
  Parameter* find(std::string_view name) noexcept;
  const Parameter* find(std::string_view name) const noexcept;
  Parameter& at(std::string_view name);  // throws gyre::Error naming the missing tensor
  const Parameter& at(std::string_view name) const;

  std::size_t size() const noexcept { return params_.size(); }
  Parameter& operator[](std::size_t i) { return params_[i]; }
  const Parameter& operator[](std::size_t i) const { return params_[i]; }
  auto begin() { return params_.begin(); }
  auto end() { return params_.end(); }
  auto begin() const { return params_.begin(); }
  auto end() const { return params_.end(); }

  /// Zeroes all gradients (only touched rows for sparse parameters) and clears touched_rows.
  void zero_grad();
  /// Total number of scalar parameters.
  std::size_t parameter_count() const noexcept;

 private:
  std::deque<Parameter> params_;
};

}  // namespace gyre::nn
