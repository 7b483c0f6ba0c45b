#include "gyre/optim/optimizer.hpp"

#include <algorithm>
#include <array>
#include <cmath>
#include <cstring>
#include <iterator>

#include "gyre/core/error.hpp"
#include "gyre/optim/adam.hpp"
#include "gyre/optim/sgd.hpp"

namespace gyre::optim {

namespace {
constexpr std::size_t kMaxSlots = 2;  // Adam keeps m and v

// Floats per block of the fused update: a block of each array it touches (value, gradient, the
// optimizer's slots, one gradient or value per replica) stays in the L1/L2 cache from the first
// operation on it to the last. A multiple of 16, so blocks keep the alignment of part_range().
constexpr Eigen::Index kFusedBlock = 2048;

}  // namespace

// Non-finite values seen, by their bits (an integer test the compiler vectorises; std::isfinite
// in a reduction it does not).
void Optimizer::NonFinite::check(const float* g, std::int64_t count) noexcept {
  std::uint32_t n = 0, i = 0;
  for (std::int64_t k = 0; k < count; ++k) {
    std::uint32_t bits = 0;
    std::memcpy(&bits, g + k, sizeof bits);
    bits &= 0x7fffffffu;
    n |= static_cast<std::uint32_t>(bits > 0x7f800000u);
    i |= static_cast<std::uint32_t>(bits == 0x7f800000u);
  }
  nan |= n;
  inf |= i;
}

void Optimizer::update_block_checked(float* value, float* grad, float* const* slots, std::int64_t count,
                                     bool zero_grad, NonFinite& seen) {
  seen.check(grad, count);
  update_block(value, grad, slots, count);
  if (zero_grad) std::fill(grad, grad + count, 0.0f);
}

void Optimizer::update_block_fused(float* value, float* grad, const float* add, float* zero_also,
                                   float* copy_to, float* const* slots, std::int64_t count, bool zero_grad,
                                   NonFinite& seen) {
  if (add != nullptr)
    for (std::int64_t k = 0; k < count; ++k) grad[k] += add[k];
  update_block_checked(value, grad, slots, count, zero_grad, seen);
  if (zero_also != nullptr) std::fill(zero_also, zero_also + count, 0.0f);
  if (copy_to != nullptr) std::copy(value, value + count, copy_to);
}

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
  prepare_step(params, learning_rate);
  update_part(params, 0, 1);
}

std::pair<Eigen::Index, Eigen::Index> Optimizer::part_range(Eigen::Index size, int part, int parts) noexcept {
  // Boundaries on multiples of 16 floats (one cache line), so parts never share a line.
  const Eigen::Index blocks = (size + 15) / 16;
  const Eigen::Index b0 = blocks * part / parts, b1 = blocks * (part + 1) / parts;
  return {std::min(size, b0 * 16), std::min(size, b1 * 16)};
}

void Optimizer::prepare_step(nn::ParameterStore& params, float learning_rate) {
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
  for (const Bound& b : state_) {
    nn::Parameter& p = params[b.param_index];
    if (!p.sparse_rows) continue;
    p.finalize_touched_rows();
    for (const std::int32_t row : p.touched_rows)
      GYRE_CHECK(row >= 0 && row < b.rows, "parameter '" + p.name + "' has touched row " +
                                               std::to_string(row) + " outside its " +
                                               std::to_string(b.rows) + " rows");
  }
  ++step_count_;
  begin_step(step_count_, learning_rate);
}

void Optimizer::update_part(nn::ParameterStore& params, int part, int parts) {
  std::array<float*, kMaxSlots> slot_ptrs{};
  for (Bound& b : state_) {
    nn::Parameter& p = params[b.param_index];
    const std::size_t n_slots = b.slots.size();
    if (!p.sparse_rows) {
      const auto [begin, end] = part_range(p.value.size(), part, parts);
      if (begin == end) continue;
      for (std::size_t s = 0; s < n_slots; ++s) slot_ptrs[s] = b.slots[s].data() + begin;
      update_block(p.value.data() + begin, p.grad.data() + begin, slot_ptrs.data(), end - begin);
      continue;
    }
    if (part != 0) continue;
    // Lazy update: only the rows that received gradient this step (see optimizer.hpp).
    const Eigen::Index cols = b.cols;
    for (const std::int32_t row : p.touched_rows) {
      const Eigen::Index offset = static_cast<Eigen::Index>(row) * cols;
      for (std::size_t s = 0; s < n_slots; ++s) slot_ptrs[s] = b.slots[s].data() + offset;
      update_block(p.value.data() + offset, p.grad.data() + offset, slot_ptrs.data(), cols);
    }
  }
}

Optimizer::GradCheck Optimizer::update_part(nn::ParameterStore& params, int part, int parts,
                                            const Fusion& fusion) {
  std::array<float*, kMaxSlots> slot_ptrs{};
  NonFinite seen;
  const float scale = fusion.grad_scale;
  // At most one other store to add from, zero and copy to, and no scaling: each block in one
  // call of update_block_fused (the same operations in the same order).
  const bool pair = scale == 1.0f && fusion.add.size() <= 1 && fusion.copy_to.size() <= 1 &&
                    (!fusion.zero || fusion.zero_also.size() <= 1);
  // One block of `count` values at `offset` of parameter `index`: the adds (in store order), the
  // check, the scaling, the update, the zeroing and the copies, each element-wise as in the
  // separate passes. `add_row` (sparse rows) tells whether a store has the block's row.
  auto block = [&](Bound& b, nn::Parameter& p, Eigen::Index offset, Eigen::Index count, auto&& add_row) {
    const std::size_t i = b.param_index;
    float* g = p.grad.data() + offset;
    if (pair) {
      const float* add = nullptr;
      if (!fusion.add.empty() && add_row((*fusion.add[0])[i])) add = (*fusion.add[0])[i].grad.data() + offset;
      float* zero_also =
          fusion.zero && !fusion.zero_also.empty() ? (*fusion.zero_also[0])[i].grad.data() + offset : nullptr;
      float* copy_to = fusion.copy_to.empty() ? nullptr : (*fusion.copy_to[0])[i].value.data() + offset;
      for (std::size_t s = 0; s < b.slots.size(); ++s) slot_ptrs[s] = b.slots[s].data() + offset;
      update_block_fused(p.value.data() + offset, g, add, zero_also, copy_to, slot_ptrs.data(), count,
                         fusion.zero, seen);
      return;
    }
    for (nn::ParameterStore* store : fusion.add) {
      const nn::Parameter& q = (*store)[i];
      if (!add_row(q)) continue;
      const float* s = q.grad.data() + offset;
      for (Eigen::Index k = 0; k < count; ++k) g[k] += s[k];
    }
    for (std::size_t s = 0; s < b.slots.size(); ++s) slot_ptrs[s] = b.slots[s].data() + offset;
    float* value = p.value.data() + offset;
    if (scale != 1.0f) {
      seen.check(g, count);
      for (Eigen::Index k = 0; k < count; ++k) g[k] *= scale;
      update_block(value, g, slot_ptrs.data(), count);
      if (fusion.zero) std::fill(g, g + count, 0.0f);
    } else {
      update_block_checked(value, g, slot_ptrs.data(), count, fusion.zero, seen);
    }
    if (fusion.zero) {
      for (nn::ParameterStore* store : fusion.zero_also) {
        float* z = (*store)[i].grad.data() + offset;
        std::fill(z, z + count, 0.0f);
      }
    }
    for (nn::ParameterStore* store : fusion.copy_to)
      std::copy(value, value + count, (*store)[i].value.data() + offset);
  };
  for (Bound& b : state_) {
    nn::Parameter& p = params[b.param_index];
    if (!p.sparse_rows) {
      const auto [begin, end] = part_range(p.value.size(), part, parts);
      for (Eigen::Index o = begin; o < end; o += kFusedBlock)
        block(b, p, o, std::min(kFusedBlock, end - o), [](const nn::Parameter&) { return true; });
      continue;
    }
    // Sparse rows: part `part` takes its share of the touched rows (the union of all stores').
    const std::size_t rows = p.touched_rows.size();
    const auto n_parts = static_cast<std::size_t>(parts), this_part = static_cast<std::size_t>(part);
    const std::size_t lo = rows * this_part / n_parts, hi = rows * (this_part + 1) / n_parts;
    const Eigen::Index cols = b.cols;
    for (std::size_t r = lo; r < hi; ++r) {
      const std::int32_t row = p.touched_rows[r];
      block(b, p, static_cast<Eigen::Index>(row) * cols, cols, [row](const nn::Parameter& q) {
        return std::binary_search(q.touched_rows.begin(), q.touched_rows.end(), row);
      });
    }
  }
  if (seen.nan != 0) return GradCheck::kNaN;
  return seen.inf != 0 ? GradCheck::kInfinite : GradCheck::kFinite;
}

void Optimizer::merge_touched_rows(nn::ParameterStore& params, std::span<nn::ParameterStore* const> others,
                                   std::vector<std::int32_t>& scratch) {
  for (std::size_t i = 0; i < params.size(); ++i) {
    nn::Parameter& p = params[i];
    if (!p.trainable || !p.sparse_rows) continue;
    p.finalize_touched_rows();
    for (nn::ParameterStore* store : others) {
      nn::Parameter& q = (*store)[i];
      q.finalize_touched_rows();
      scratch.clear();
      std::set_union(p.touched_rows.begin(), p.touched_rows.end(), q.touched_rows.begin(),
                     q.touched_rows.end(), std::back_inserter(scratch));
      p.touched_rows.assign(scratch.begin(), scratch.end());
    }
  }
}

const char* to_string(OptimizerKind kind) noexcept {
  switch (kind) {
    case OptimizerKind::kSgd:
      return "sgd";
    case OptimizerKind::kAdam:
      return "adam";
    case OptimizerKind::kAdamW:
      return "adamw";
  }
  return "?";
}

std::unique_ptr<Optimizer> make_optimizer(OptimizerKind kind, const OptimizerConfig& config) {
  switch (kind) {
    case OptimizerKind::kSgd:
      return std::make_unique<Sgd>(config);
    case OptimizerKind::kAdam:
      return std::make_unique<Adam>(config, false);
    case OptimizerKind::kAdamW:
      return std::make_unique<Adam>(config, true);
  }
  throw ConfigError("optimizer", "unknown optimizer");
}

std::unique_ptr<Optimizer> make_optimizer(std::string_view name, const OptimizerConfig& config) {
  for (const auto kind : {OptimizerKind::kSgd, OptimizerKind::kAdam, OptimizerKind::kAdamW})
    if (name == to_string(kind)) return make_optimizer(kind, config);
  throw ConfigError("optimizer",
                    "unknown optimizer '" + std::string(name) + "'; expected sgd, adam or adamw");
}

}  // namespace gyre::optim
