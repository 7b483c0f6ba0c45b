#include "gyre/train/reducer.hpp"

#include "gyre/core/error.hpp"
#include "gyre/optim/optimizer.hpp"

namespace gyre::train {

void InProcessReducer::reduce(nn::ParameterStore& into, std::span<nn::ParameterStore* const> others) {
  for (nn::ParameterStore* other : others) {
    GYRE_CHECK(other->size() == into.size(), "reduce: replicas of different models");
    for (std::size_t i = 0; i < into.size(); ++i) {
      nn::Parameter& dst = into[i];
      nn::Parameter& src = (*other)[i];
      if (!dst.trainable) continue;
      if (dst.sparse_rows) {
        src.finalize_touched_rows();  // a row listed twice must still be added once
        for (const auto row : src.touched_rows) dst.grad.row(row) += src.grad.row(row);
        dst.touched_rows.insert(dst.touched_rows.end(), src.touched_rows.begin(), src.touched_rows.end());
      } else {
        dst.grad += src.grad;
      }
    }
  }
  for (auto& p : into)
    if (p.sparse_rows) p.finalize_touched_rows();
}

void InProcessReducer::reduce_part(nn::ParameterStore& into, std::span<nn::ParameterStore* const> others,
                                   int part, int parts) {
  for (std::size_t i = 0; i < into.size(); ++i) {
    nn::Parameter& dst = into[i];
    if (!dst.trainable) continue;
    if (dst.sparse_rows) {
      if (part != 0) continue;
      for (nn::ParameterStore* other : others) {
        nn::Parameter& src = (*other)[i];
        src.finalize_touched_rows();  // a row listed twice must still be added once
        for (const auto row : src.touched_rows) dst.grad.row(row) += src.grad.row(row);
        dst.touched_rows.insert(dst.touched_rows.end(), src.touched_rows.begin(), src.touched_rows.end());
      }
      dst.finalize_touched_rows();
      continue;
    }
    const auto [begin, end] = optim::Optimizer::part_range(dst.grad.size(), part, parts);
    float* d = dst.grad.data();
    for (nn::ParameterStore* other : others) {
      const float* s = (*other)[i].grad.data();
      for (Eigen::Index k = begin; k < end; ++k) d[k] += s[k];
    }
  }
}

void InProcessReducer::broadcast(const nn::ParameterStore& from, std::span<nn::ParameterStore* const> to) {
  for (nn::ParameterStore* dst_store : to) {
    for (std::size_t i = 0; i < from.size(); ++i) {
      const nn::Parameter& src = from[i];
      nn::Parameter& dst = (*dst_store)[i];
      if (!src.trainable) continue;
      if (src.sparse_rows) {
        for (const auto row : src.touched_rows) dst.value.row(row) = src.value.row(row);
      } else {
        dst.value = src.value;
      }
    }
  }
}

}  // namespace gyre::train
