#pragma once
// Gradient reduction for data-parallel training. Every worker computes gradients on its slice of
// the batch in its own replica; the reducer sums them into the master replica in a fixed order
// (worker 1, 2, ... added to worker 0), so results depend only on the seed and the worker count.
// This is the one seam a multi-machine backend (MPI allreduce) would implement; the trainer
// knows nothing else about where the other workers live.

#include <span>

#include "gyre/nn/parameter.hpp"

namespace gyre::train {

class GradientReducer {
 public:
  virtual ~GradientReducer() = default;
  /// Adds the gradients of `others` into `into`, in order. Sparse-row parameters add only their
  /// touched rows, each once (the others' touched_rows are made sorted and unique first: a
  /// backward lists a row once per use), and merge touched_rows (sorted, unique afterwards).
  virtual void reduce(nn::ParameterStore& into, std::span<nn::ParameterStore* const> others) = 0;
  /// Copies parameter values from `from` to every store in `to` (after the optimizer step).
  /// Sparse-row parameters copy only the rows touched in `from` this step.
  virtual void broadcast(const nn::ParameterStore& from, std::span<nn::ParameterStore* const> to) = 0;
};

/// Reduction between replicas in this process.
class InProcessReducer final : public GradientReducer {
 public:
  void reduce(nn::ParameterStore& into, std::span<nn::ParameterStore* const> others) override;
  void broadcast(const nn::ParameterStore& from, std::span<nn::ParameterStore* const> to) override;
  /// reduce() split across threads: part `part` of `parts` adds the others' gradients into `into`
  /// on its element range of every dense parameter (optim::Optimizer::part_range); part 0 also
  /// does the sparse-row parameters. Same additions in the same order as reduce(), so the same
  /// bits; the parts touch disjoint memory and may run at the same time.
  void reduce_part(nn::ParameterStore& into, std::span<nn::ParameterStore* const> others, int part,
                   int parts);
};

}  // namespace gyre::train
