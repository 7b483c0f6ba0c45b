#pragma once
// The parameter tensors of a checkpoint or model file as raw bytes, for bit-for-bit comparisons
// of two runs (same seed, resumed, split across threads or ranks).

#include <filesystem>
#include <string>
#include <utility>
#include <vector>

#include "gyre/runtime/model_file.hpp"

namespace gyre::test {

/// (tensor name, tensor bytes) in file order.
inline std::vector<std::pair<std::string, std::string>> weights_of(const std::filesystem::path& checkpoint) {
  const auto file = gyre::runtime::ModelFile::open(checkpoint.string());
  std::vector<std::pair<std::string, std::string>> out;
  for (const auto& t : file.tensors())
    out.emplace_back(t.name, std::string(static_cast<const char*>(t.data), t.bytes));
  return out;
}

}  // namespace gyre::test
