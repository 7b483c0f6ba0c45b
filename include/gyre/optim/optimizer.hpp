#pragma once
// Optimizer interface shared by SGD (sgd.hpp) and Adam/AdamW (adam.hpp), and the factory that
// builds one from the names used in training configs.
//
// Contract:
// - step() reads Parameter::grad and updates Parameter::value of every trainable parameter of
//   the store, in registration order; it never zeroes or modifies the gradients (the trainer calls
//   ParameterStore::zero_grad()). Parameters with trainable == false are skipped and get no
//   state.
// - Sparse-row parameters (embeddings, Parameter::sparse_rows) are updated only on the rows in
//   touched_rows, and their per-row optimizer state ("moments") changes only on those rows: a row
//   that receives no gradient is neither moved nor has its moments decayed ("lazy" update). Dense
//   optimizers would also decay the moments of untouched rows and keep moving them by momentum;
//   the two agree exactly when every row is touched at every step. Weight decay of sparse
//   parameters likewise applies only to touched rows.
// - State (moments and the step count) is exposed as named tensors so that a checkpoint can save
//   and restore it; a resumed run then continues bit-identically.

#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

#include "gyre/nn/parameter.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::optim {

/// A named optimizer state tensor, e.g. {"optim.tokens.vectors.m", &moment}. The pointer stays
/// valid until the optimizer is re-bound or destroyed; writing through it restores state.
using StateTensor = std::pair<std::string, nn::Matrix*>;

class Optimizer {
 public:
  virtual ~Optimizer() = default;
  Optimizer(const Optimizer&) = delete;
  Optimizer& operator=(const Optimizer&) = delete;

  /// Applies one update with the given learning rate (finite, >= 0) to every trainable parameter.
  /// Binds to the store on first use (see bind()). Throws gyre::Error if the store's trainable
  /// parameters no longer match the bound ones (count or shape). Does not allocate after bind.
  void step(nn::ParameterStore& params, float learning_rate);

  /// The same update split across threads: prepare_step() once (checks the store, applies the
  /// bias corrections, counts the step), then update_part(params, part, parts) for every part in
  /// 0..parts-1, from any threads at once. Dense parameters are split into disjoint element
  /// ranges (multiples of 16), sparse-row parameters are updated whole by part 0. The updates are
  /// element-wise, so the result is bit-identical to step() for any `parts`.
  void prepare_step(nn::ParameterStore& params, float learning_rate);
  void update_part(nn::ParameterStore& params, int part, int parts);

  /// Work done on each block of parameters in the same pass as its update (issue 13: the
  /// trainer's reduce, clipping, zeroing and broadcast would otherwise each walk all parameters
  /// once more, mostly from memory). The stores are replicas of `params` (same parameters, same
  /// order, same shapes).
  struct Fusion {
    /// Gradients added into params' gradients first, store by store in this order (the reduction
    /// of data-parallel workers). Sparse-row parameters: the rows in each store's touched_rows,
    /// which must be sorted and unique, and params' touched_rows must already hold their union
    /// (merge_touched_rows()).
    std::span<nn::ParameterStore* const> add;
    /// The gradient (after the adds) is multiplied by this before the update (clipping).
    float grad_scale = 1.0f;
    /// Afterwards params' gradients and these stores' gradients are zeroed (sparse-row
    /// parameters: on params' touched rows; touched_rows themselves are left for the caller to
    /// clear once every part is done).
    bool zero = false;
    std::span<nn::ParameterStore* const> zero_also;
    /// Afterwards the new values are copied into these stores.
    std::span<nn::ParameterStore* const> copy_to;
  };
  /// What the gradients held, after the adds and before the scaling.
  enum class GradCheck { kFinite, kInfinite, kNaN };
  /// update_part() with the work of `fusion`, done block by block (a few KiB at a time, so each
  /// block is still in cache for every operation on it). The same operations in the same order as
  /// the separate passes, so the same bits. Sparse-row parameters are split across the parts by
  /// touched row. The update runs even when a gradient is not finite; the result says so (the
  /// caller stops training).
  GradCheck update_part(nn::ParameterStore& params, int part, int parts, const Fusion& fusion);
  /// Sets touched_rows of params' sparse-row parameters to the sorted union of their own and the
  /// others' touched rows (each list made sorted and unique first). Allocates only when a list
  /// outgrows its capacity.
  static void merge_touched_rows(nn::ParameterStore& params, std::span<nn::ParameterStore* const> others,
                                 std::vector<std::int32_t>& scratch);
  /// Elements [begin, end) of a dense parameter with `size` values that part `part` of `parts`
  /// owns (the split update_part() uses; the trainer reduces and zeroes gradients by it too).
  static std::pair<Eigen::Index, Eigen::Index> part_range(Eigen::Index size, int part, int parts) noexcept;

  /// Allocates zeroed state for every trainable parameter of the store, in registration order.
  /// Call it before restoring a checkpoint into state_tensors(). Re-binding discards the state and
  /// resets the step count.
  void bind(const nn::ParameterStore& params);
  bool bound() const noexcept { return bound_; }

  /// Named state tensors, in a fixed order (parameter order, then the optimizer's own order).
  /// Names are "optim.<parameter name>.<slot>" with slot "velocity" (SGD with momentum) or "m",
  /// "v" (Adam, AdamW). Empty for plain SGD. Throws gyre::Error unless bound.
  std::vector<StateTensor> state_tensors();

  /// Number of step() calls applied so far (Adam's t). Saved with the checkpoint.
  std::int64_t step_count() const noexcept { return step_count_; }
  void set_step_count(std::int64_t steps);

  /// "sgd", "adam" or "adamw": the name make_optimizer() accepts.
  virtual std::string_view name() const noexcept = 0;

 protected:
  Optimizer() = default;

  /// Names of the per-parameter state slots this optimizer keeps (same shape as the parameter).
  virtual std::vector<std::string> slot_names() const = 0;

  /// Called once per step() before any update_block(); `step` is the 1-based step number t.
  virtual void begin_step(std::int64_t step, float learning_rate) = 0;

  /// Update of one contiguous block of `count` values of one parameter. `slots[k]` points at the
  /// same block of slot k. Called once for a dense parameter (whole tensor) or once per touched
  /// row for a sparse one, with the values given to the last begin_step().
  virtual void update_block(float* value, const float* grad, float* const* slots, std::int64_t count) = 0;

  /// Non-finite gradient values seen by the fused update (update_part with a Fusion).
  struct NonFinite {
    std::uint32_t nan = 0, inf = 0;
    void check(const float* g, std::int64_t count) noexcept;
  };
  /// update_block() that, in the same pass, first records non-finite values of `grad` in `seen`
  /// and, when zero_grad, zeroes `grad` after reading it. The default does the three in turn; an
  /// optimizer may do them in one loop (Adam's AVX-512 kernel).
  virtual void update_block_checked(float* value, float* grad, float* const* slots, std::int64_t count,
                                    bool zero_grad, NonFinite& seen);
  /// The fused step's whole work on one block when it involves at most one other store (two
  /// data-parallel workers, issue 13), in this order: grad += add (when add is not null), then
  /// update_block_checked(), then zero_also zeroed (when not null) and the new values copied to
  /// copy_to (when not null). The default does these in turn; an optimizer may do them in one
  /// loop over the block (Adam's AVX-512 kernel: every array read once).
  virtual void update_block_fused(float* value, float* grad, const float* add, float* zero_also,
                                  float* copy_to, float* const* slots, std::int64_t count, bool zero_grad,
                                  NonFinite& seen);

 private:
  struct Bound {
    std::size_t param_index;  // index into the store
    Eigen::Index rows, cols;
    std::vector<nn::Matrix> slots;
  };
  bool bound_ = false;
  std::int64_t step_count_ = 0;
  std::vector<Bound> state_;
  std::vector<std::string> state_names_;  // parameter names, for state_tensors()
};

/// Hyperparameters of every optimizer; each optimizer reads the fields it uses and
/// make_optimizer() rejects impossible values with gyre::ConfigError.
struct OptimizerConfig {
  float momentum = 0.0F;      // SGD: velocity decay mu in [0, 1); 0 = plain SGD
  bool nesterov = false;      // SGD: Nesterov's accelerated gradient (needs momentum > 0)
  float beta1 = 0.9F;         // Adam/AdamW: first-moment decay (Kingma & Ba 2015, Algorithm 1)
  float beta2 = 0.999F;       // Adam/AdamW: second-moment decay
  float epsilon = 1e-8F;      // Adam/AdamW: added to sqrt(v_hat)
  float weight_decay = 0.0F;  // SGD, Adam: L2 term added to the gradient; AdamW: decoupled decay
};

enum class OptimizerKind { kSgd, kAdam, kAdamW };
/// "sgd", "adam", "adamw".
const char* to_string(OptimizerKind kind) noexcept;

/// Builds the optimizer. Throws gyre::ConfigError for out-of-range hyperparameters.
std::unique_ptr<Optimizer> make_optimizer(OptimizerKind kind, const OptimizerConfig& config);
/// The same by name ("sgd", "adam" or "adamw"); throws gyre::ConfigError("optimizer", ...) for
/// another name.
std::unique_ptr<Optimizer> make_optimizer(std::string_view name, const OptimizerConfig& config);

}  // namespace gyre::optim
