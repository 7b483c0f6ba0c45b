#include "gyre/optim/optimizer.hpp"

#include <array>
#include <cmath>

#include "gyre/core/error.hpp"
#include "gyre/optim/adam.hpp"
#include "gyre/optim/sgd.hpp"

namespace gyre::optim {

namespace {
constexpr std::size_t kMaxSlots = 2;  // Adam keeps m and v
}  // namespace

void Optimizer::bind(const nn::ParameterStore& params) {
  const std::vector<std::string> slots = slot_names();
  GYRE_CHECK(slots.size() <= kMaxSlots, "optimizer keeps too many state slots");
  state_.clear();
  state_names_.clear();
  for (std::size_t i = 0; i < params.size(); ++i) {
    const nn::Parameter& p = params[i];
    if (!p.trainable) continue;
    Bound b{i, p.value.rows(), p.value.cols(), {}};
    for (std::size_t s = 0; s < slots.size(); ++s) b.slots.push_back(nn::Matrix::Zero(b.rows, b.cols));
    state_.push_back(std::move(b));
    state_names_.push_back(p.name);
  }
  step_count_ = 0;
  bound_ = true;
}

std::vector<StateTensor> Optimizer::state_tensors() {
  GYRE_CHECK(bound_, "optimizer state requested before bind()");
  const std::vector<std::string> slots = slot_names();
  std::vector<StateTensor> out;
  for (std::size_t k = 0; k < state_.size(); ++k)
    for (std::size_t s = 0; s < slots.size(); ++s)
      out.emplace_back("optim." + state_names_[k] + "." + slots[s], &state_[k].slots[s]);
  return out;
}

void Optimizer::set_step_count(std::int64_t steps) {
  GYRE_CHECK(steps >= 0, "optimizer step count must be >= 0");
  step_count_ = steps;
}

void Optimizer::step(nn::ParameterStore& params, float learning_rate) {
  GYRE_CHECK(std::isfinite(learning_rate) && learning_rate >= 0.0F,
             "learning rate must be finite and >= 0, got " + std::to_string(learning_rate));
  if (!bound_) bind(params);

  // The store must still hold the trainable parameters bind() saw, in the same order and shape.
  std::size_t k = 0;
  for (std::size_t i = 0; i < params.size(); ++i) {
    const nn::Parameter& p = params[i];
    if (!p.trainable) continue;
    GYRE_CHECK(
        k < state_.size() && state_[k].param_index == i && state_[k].rows == p.value.rows() &&
            state_[k].cols == p.value.cols() && p.grad.rows() == p.value.rows() &&
            p.grad.cols() == p.value.cols(),
        "parameter '" + p.name + "' does not match the optimizer state bound to it (re-bind the optimizer)");
    ++k;
  }
  GYRE_CHECK(k == state_.size(),
             "the parameter store lost trainable parameters since the optimizer was bound");

  const std::int64_t t = step_count_ + 1;
  begin_step(t, learning_rate);
  std::array<float*, kMaxSlots> slot_ptrs{};
  for (Bound& b : state_) {
    nn::Parameter& p = params[b.param_index];
    const std::size_t n_slots = b.slots.size();
    if (!p.sparse_rows) {
      for (std::size_t s = 0; s < n_slots; ++s) slot_ptrs[s] = b.slots[s].data();
      update_block(p.value.data(), p.grad.data(), slot_ptrs.data(), p.value.size());
      continue;
    }
    // Lazy update: only the rows that received gradient this step (see optimizer.hpp).
    p.finalize_touched_rows();
    const Eigen::Index cols = b.cols;
    for (const std::int32_t row : p.touched_rows) {
      GYRE_CHECK(row >= 0 && row < b.rows, "parameter '" + p.name + "' has touched row " +
                                               std::to_string(row) + " outside its " +
                                               std::to_string(b.rows) + " rows");
      const Eigen::Index offset = static_cast<Eigen::Index>(row) * cols;
      for (std::size_t s = 0; s < n_slots; ++s) slot_ptrs[s] = b.slots[s].data() + offset;
      update_block(p.value.data() + offset, p.grad.data() + offset, slot_ptrs.data(), cols);
    }
  }
  step_count_ = t;
}

std::unique_ptr<Optimizer> make_optimizer(std::string_view name, const OptimizerConfig& config) {
  if (name == "sgd") return std::make_unique<Sgd>(config);
  if (name == "adam") return std::make_unique<Adam>(config, false);
  if (name == "adamw") return std::make_unique<Adam>(config, true);
  throw ConfigError("optimizer",
                    "unknown optimizer '" + std::string(name) + "'; expected sgd, adam or adamw");
}

}  // namespace gyre::optim
