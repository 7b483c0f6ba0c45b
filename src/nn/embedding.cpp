#include "gyre/nn/embedding.hpp"

#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <fstream>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

Embedding::Embedding(ParameterStore& store, int vocab_size, int dim, const std::string& name)
    : weight_(store.add(name + ".vectors", vocab_size, dim, /*sparse_rows=*/true)) {}

namespace {

// Rows are read (forward) and added into (backward) in token order, at random places of a table
// that is mostly out of cache: the row kRowsAhead tokens later is fetched while this one is copied
// (issue 13). A hint only (GCC/Clang builtin, on every target); nothing computed changes.
constexpr std::size_t kRowsAhead = 4;

void prefetch_row(const float* row, Eigen::Index cols, bool for_write) {
#if defined(__GNUC__) || defined(__clang__)
  const auto bytes = static_cast<std::size_t>(cols) * sizeof(float);
  for (std::size_t b = 0; b < bytes; b += 64) {
    if (for_write)
      __builtin_prefetch(reinterpret_cast<const char*>(row) + b, 1);
    else
      __builtin_prefetch(reinterpret_cast<const char*>(row) + b, 0);
  }
#else
  (void)row;
  (void)cols;
  (void)for_write;
#endif
}

}  // namespace

void Embedding::init_parameters(Rng& rng) {
  normal(weight_.value, rng, 0.1f);  // N(0, 1) * 0.1: common practice, no source (DEVELOPERS.md)
  weight_.value.row(0).setZero();    // padding
}

void Embedding::forward(std::span<const std::int32_t> ids, Matrix& out) {
  const auto N = static_cast<Eigen::Index>(ids.size());
  if (out.rows() != N || out.cols() != weight_.value.cols()) out.resize(N, weight_.value.cols());
  forward(ids, Eigen::Ref<Matrix>(out));
}

void Embedding::forward(std::span<const std::int32_t> ids, Eigen::Ref<Matrix> out) {
  const auto V = weight_.value.rows();
  const auto E = weight_.value.cols();
  const auto N = static_cast<Eigen::Index>(ids.size());
  GYRE_CHECK(out.rows() == N && out.cols() == E, "Embedding::forward: output must be [ids x dim]");
  ids_.assign(ids.begin(), ids.end());
  for (Eigen::Index i = 0; i < N; ++i) {
    const std::int32_t id = ids[static_cast<std::size_t>(i)];
    if (const auto next = static_cast<std::size_t>(i) + kRowsAhead; next < ids.size()) {
      const std::int32_t ahead = ids[next];
      if (ahead > 0 && ahead < V) prefetch_row(weight_.value.row(ahead).data(), E, false);
    }
    GYRE_CHECK(id >= 0 && id < V, "Embedding::forward: token id " + std::to_string(id) +
                                      " outside vocabulary of " + std::to_string(V));
    if (id == 0)
      out.row(i).setZero();
    else
      out.row(i) = weight_.value.row(id);
  }
}

void Embedding::backward(Eigen::Ref<const Matrix> d_out) {
  if (!weight_.trainable) return;
  GYRE_CHECK(d_out.rows() == static_cast<Eigen::Index>(ids_.size()) && d_out.cols() == weight_.value.cols(),
             "Embedding::backward: d_out must be [N x dim] for the ids of the last forward");
  const Eigen::Index E = weight_.grad.cols();
  for (std::size_t i = 0; i < ids_.size(); ++i) {
    const std::int32_t id = ids_[i];
    if (i + kRowsAhead < ids_.size() && ids_[i + kRowsAhead] > 0)
      prefetch_row(weight_.grad.row(ids_[i + kRowsAhead]).data(), E, true);
    if (id == 0) continue;  // padding row never learns
    weight_.grad.row(id) += d_out.row(static_cast<Eigen::Index>(i));
    weight_.touched_rows.push_back(id);
  }
}

namespace {

std::vector<std::string_view> split_ws(std::string_view s) {
  std::vector<std::string_view> out;
  std::size_t i = 0;
  while (i < s.size()) {
    while (i < s.size() && (s[i] == ' ' || s[i] == '\t' || s[i] == '\r')) ++i;
    const std::size_t j0 = i;
    while (i < s.size() && s[i] != ' ' && s[i] != '\t' && s[i] != '\r') ++i;
    if (i > j0) out.push_back(s.substr(j0, i - j0));
  }
  return out;
}

bool parse_float(std::string_view s, float& v) {
  const std::string tmp(s);
  char* end = nullptr;
  errno = 0;
  v = std::strtof(tmp.c_str(), &end);
  return end == tmp.c_str() + tmp.size() && errno == 0 && std::isfinite(v);
}

bool is_count(std::string_view s) {
  if (s.empty()) return false;
  for (char ch : s)
    if (ch < '0' || ch > '9') return false;
  return true;
}

}  // namespace

PretrainedStats Embedding::load_pretrained(const std::string& path,
                                           const std::function<int(std::string_view)>& lookup) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw IoError("cannot open vector file '" + path + "'");
  const auto E = static_cast<std::size_t>(weight_.value.cols());
  const int V = vocab_size();
  PretrainedStats stats;
  std::string line;
  std::size_t line_no = 0;
  std::vector<float> values(E);
  while (std::getline(in, line)) {
    ++line_no;
    const auto fields = split_ws(line);
    if (fields.empty()) throw ParseError(path, line_no, "empty line");
    if (line_no == 1 && fields.size() == 2 && is_count(fields[0]) && is_count(fields[1])) {
      if (std::stoul(std::string(fields[1])) != E)
        throw ParseError(
            path, line_no,
            "header declares dimension " + std::string(fields[1]) + ", embedding has " + std::to_string(E));
      continue;
    }
    if (fields.size() != E + 1)
      throw ParseError(path, line_no,
                       "expected a token and " + std::to_string(E) + " values, found " +
                           std::to_string(fields.size() - 1) + " values");
    for (std::size_t k = 0; k < E; ++k)
      if (!parse_float(fields[k + 1], values[k]))
        throw ParseError(path, line_no,
                         "value " + std::to_string(k + 1) + " ('" + std::string(fields[k + 1]) +
                             "') is not a finite number");
    ++stats.lines;
    const int id = lookup(fields[0]);
    if (id < 0) continue;  // token outside the vocabulary: counted in lines, not matched
    if (id >= V)
      throw Error("load_pretrained: lookup returned id " + std::to_string(id) + " >= vocabulary size");
    if (id == 0) continue;  // padding stays zero
    for (std::size_t k = 0; k < E; ++k) weight_.value(id, static_cast<Eigen::Index>(k)) = values[k];
    ++stats.matched;
  }
  if (in.bad()) throw IoError("read error in vector file '" + path + "'");
  return stats;
}

}  // namespace gyre::nn
