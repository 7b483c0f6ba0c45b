#include "gyre/nn/parameter.hpp"

#include <algorithm>
#include <functional>

#include "gyre/core/error.hpp"

namespace gyre::nn {

void Parameter::finalize_touched_rows() {
  // Already sorted and unique (finalized before, or merged): nothing to do.
  if (std::adjacent_find(touched_rows.begin(), touched_rows.end(), std::greater_equal<>()) ==
      touched_rows.end())
    return;
  std::sort(touched_rows.begin(), touched_rows.end());
  touched_rows.erase(std::unique(touched_rows.begin(), touched_rows.end()), touched_rows.end());
}

Parameter& ParameterStore::add(std::string name, Eigen::Index rows, Eigen::Index cols, bool sparse_rows) {
  GYRE_CHECK(rows > 0 && cols > 0, "parameter '" + name + "' must have a positive shape");
  GYRE_CHECK(find(name) == nullptr, "parameter '" + name + "' registered twice");
  Parameter& p = params_.emplace_back();
  p.name = std::move(name);
  p.value = Matrix::Zero(rows, cols);
  p.grad = Matrix::Zero(rows, cols);
  p.sparse_rows = sparse_rows;
  return p;
}

Parameter* ParameterStore::find(std::string_view name) noexcept {
  for (auto& p : params_)
    if (p.name == name) return &p;
  return nullptr;
}

const Parameter* ParameterStore::find(std::string_view name) const noexcept {
  for (const auto& p : params_)
    if (p.name == name) return &p;
  return nullptr;
}

Parameter& ParameterStore::at(std::string_view name) {
  Parameter* p = find(name);
  if (p == nullptr) throw Error("no parameter named '" + std::string(name) + "'");
  return *p;
}

const Parameter& ParameterStore::at(std::string_view name) const {
  const Parameter* p = find(name);
  if (p == nullptr) throw Error("no parameter named '" + std::string(name) + "'");
  return *p;
}

void ParameterStore::zero_grad() {
  for (auto& p : params_) {
    if (p.sparse_rows) {
      for (const auto row : p.touched_rows) p.grad.row(row).setZero();
      p.touched_rows.clear();
    } else {
      p.grad.setZero();
    }
  }
}

std::size_t ParameterStore::parameter_count() const noexcept {
  std::size_t n = 0;
  for (const auto& p : params_) n += p.size();
  return n;
}

}  // namespace gyre::nn
