// Model loading (header schema in docs/model-format.md) and the forward pass: embedding ->
// LSTM/GRU stack -> pooling -> head, exactly as DEVELOPERS.md ("Numerical conventions") defines it.

#include "gyre/runtime/model.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <optional>

#include "runtime/detail/half.hpp"
#include "runtime/detail/json.hpp"
#include "runtime/detail/kernels.hpp"
#include "runtime/detail/spans.hpp"

namespace gyre::runtime {

using detail::Json;

const char* to_string(Task v) { return v == Task::kClassify ? "classify" : "tag"; }
const char* to_string(Cell v) { return v == Cell::kLstm ? "lstm" : "gru"; }
const char* to_string(Pooling v) {
  return v == Pooling::kLast ? "last" : v == Pooling::kMean ? "mean" : "max";
}
const char* to_string(Output v) {
  return v == Output::kSoftmax ? "softmax" : v == Output::kSigmoid ? "sigmoid" : "crf";
}
const char* to_string(TagScheme v) { return v == TagScheme::kNone ? "none" : v == TagScheme::kBio ? "bio" : "bioes"; }

namespace {

/// A weight matrix viewed in the file's bytes.
struct Weights {
  DType dtype = DType::kF32;
  const void* data = nullptr;
  const float* scales = nullptr;
  std::vector<std::int32_t> sums;  // i8: per-row sum of q (VNNI correction)
  std::vector<float> packed;        // f32: panel layout for matmul_packed_f32 (one copy at load)
  std::vector<std::int8_t> packed_i8;  // i8: VNNI operand layout, when the kernels have one
  std::vector<std::uint16_t> packed_f16;  // f16: panel layout
  std::size_t rows = 0, cols = 0;
};

struct Direction {
  Weights w_input, w_hidden;
  std::vector<float> bias, bias_hidden;
};

inline float sigmoid(float x) { return 1.0f / (1.0f + std::exp(-x)); }

std::uint64_t fnv1a(std::string_view s) {  // FNV-1a 64-bit (Fowler, Noll, Vo; IETF draft-eastlake-fnv)
  std::uint64_t h = 0xcbf29ce484222325ULL;
  for (char c : s) {
    h ^= static_cast<unsigned char>(c);
    h *= 0x100000001b3ULL;
  }
  return h;
}

template <class T>
inline void ensure(std::vector<T>& v, std::size_t n) {
  if (v.size() < n) v.resize(n);
}

}  // namespace

struct Model::Impl {
  explicit Impl(ModelFile f) : file(std::move(f)) {}
  ModelFile file;
  Architecture arch;
  std::vector<std::string> labels;
  TokenizerSettings tok_settings;
  std::optional<Tokenizer> tokenizer;
  std::string vocab_blob;
  std::vector<std::uint32_t> vocab_off;  // V + 1 offsets into vocab_blob
  std::vector<std::uint32_t> slots;      // open addressing: id + 1, 0 = empty
  Weights embedding;
  std::vector<std::vector<Direction>> layers;
  Weights head;
  std::vector<float> head_bias;
  std::vector<float> crf_trans, crf_start, crf_end;
  std::vector<char> tag_prefix;       // 'B','I','E','S' or 'O'
  std::vector<std::string> tag_type;  // "" for O
  const detail::Kernels* kernels = nullptr;
  std::size_t max_input = 0;

  std::size_t vocab_size() const { return vocab_off.size() - 1; }
  std::string_view vocab(std::uint32_t id) const {
    return std::string_view(vocab_blob).substr(vocab_off[id], vocab_off[id + 1] - vocab_off[id]);
  }
  std::uint32_t lookup(std::string_view token) const {
    const std::size_t mask = slots.size() - 1;
    for (std::size_t i = static_cast<std::size_t>(fnv1a(token)) & mask;; i = (i + 1) & mask) {
      const std::uint32_t s = slots[i];
      if (s == 0) return 1;  // unknown
      if (vocab(s - 1) == token) return s - 1;
    }
  }

  [[noreturn]] void fail(const std::string& msg) const { throw Error(file.name() + ": " + msg); }
  void parse_header();
  void load_tensors();
  Weights weights(const std::string& name, std::size_t rows, std::size_t cols, bool pack = true) const;
  std::vector<float> vector(const std::string& name, std::size_t rows, std::size_t cols) const;
};

// ---- header -------------------------------------------------------------------------------------

namespace {

struct Field {
  const Model::Impl& m;
  const Json& obj;
  std::string where;

  const Json& get(const char* key) const {
    const Json* v = obj.find(key);
    if (!v) m.fail("header: missing \"" + where + key + "\"");
    return *v;
  }
  std::string str(const char* key) const {
    const Json& v = get(key);
    if (!v.is_string()) m.fail("header: \"" + where + key + "\" must be a string");
    return v.as_string();
  }
  bool boolean(const char* key) const {
    const Json& v = get(key);
    if (!v.is_bool()) m.fail("header: \"" + where + key + "\" must be true or false");
    return v.as_bool();
  }
  std::size_t integer(const char* key, double lo, double hi) const {
    const Json& v = get(key);
    if (!v.is_number() || v.as_number() != std::floor(v.as_number()) || v.as_number() < lo || v.as_number() > hi)
      m.fail("header: \"" + where + key + "\" must be an integer in [" + std::to_string(static_cast<long long>(lo)) +
             ", " + std::to_string(static_cast<long long>(hi)) + "]");
    return static_cast<std::size_t>(v.as_number());
  }
  template <class E>
  E choice(const char* key, std::initializer_list<std::pair<const char*, E>> options) const {
    const std::string s = str(key);
    std::string names;
    for (const auto& [name, value] : options) {
      if (s == name) return value;
      names += names.empty() ? "" : ", ";
      names += name;
    }
    m.fail("header: \"" + where + key + "\" is \"" + s + "\"; expected one of " + names);
  }
  void only(std::initializer_list<const char*> allowed) const {
    for (const auto& k : obj.keys()) {
      bool ok = false;
      for (const char* a : allowed) ok = ok || k == a;
      if (!ok) m.fail("header: unknown key \"" + where + k + "\" (written by a newer gyre?)");
    }
  }
};

}  // namespace

void Model::Impl::parse_header() {
  const Json h = Json::parse(file.header_json(), file.name() + ": header JSON");
  const Field top{*this, h, ""};
  const Json& arch_json = top.get("architecture");
  if (!arch_json.is_object()) fail("header: \"architecture\" must be an object");
  const Field a{*this, arch_json, "architecture."};
  a.only({"task", "cell", "embedding_size", "hidden_size", "layers", "bidirectional", "pooling", "output",
          "multi_label_threshold", "tag_scheme"});
  arch.task = a.choice<Task>("task", {{"classify", Task::kClassify}, {"tag", Task::kTag}});
  arch.cell = a.choice<Cell>("cell", {{"lstm", Cell::kLstm}, {"gru", Cell::kGru}});
  arch.embedding_size = a.integer("embedding_size", 1, 1 << 16);
  arch.hidden_size = a.integer("hidden_size", 1, 1 << 16);
  arch.layers = a.integer("layers", 1, 64);
  arch.bidirectional = a.boolean("bidirectional");
  if (arch.task == Task::kClassify) {
    arch.pooling = a.choice<Pooling>("pooling", {{"last", Pooling::kLast}, {"mean", Pooling::kMean}, {"max", Pooling::kMax}});
    arch.output = a.choice<Output>("output", {{"softmax", Output::kSoftmax}, {"sigmoid", Output::kSigmoid}});
    if (arch.output == Output::kSigmoid) {
      const Json& t = a.get("multi_label_threshold");
      if (!t.is_number() || !(t.as_number() > 0.0 && t.as_number() < 1.0))
        fail("header: \"architecture.multi_label_threshold\" must be a number in (0, 1)");
      arch.multi_label_threshold = static_cast<float>(t.as_number());
    }
  } else {
    arch.output = a.choice<Output>("output", {{"softmax", Output::kSoftmax}, {"crf", Output::kCrf}});
    arch.tag_scheme =
        a.choice<TagScheme>("tag_scheme", {{"bio", TagScheme::kBio}, {"bioes", TagScheme::kBioes}, {"none", TagScheme::kNone}});
  }

  const Json& labels_json = top.get("labels");
  if (!labels_json.is_array() || labels_json.size() == 0) fail("header: \"labels\" must be a non-empty array");
  for (const Json& l : labels_json.items()) {
    if (!l.is_string() || l.as_string().empty()) fail("header: every label must be a non-empty string");
    labels.push_back(l.as_string());
  }
  {
    std::vector<std::string> sorted = labels;
    std::sort(sorted.begin(), sorted.end());
    const auto dup = std::adjacent_find(sorted.begin(), sorted.end());
    if (dup != sorted.end()) fail("header: label \"" + *dup + "\" appears twice");
  }
  if (arch.task == Task::kTag) {
    for (const std::string& l : labels) {
      if (arch.tag_scheme == TagScheme::kNone || l == "O") {
        tag_prefix.push_back(l == "O" ? 'O' : 'S');
        tag_type.push_back(l == "O" ? "" : l);
        continue;
      }
      const std::string allowed = arch.tag_scheme == TagScheme::kBio ? "BI" : "BIES";
      if (l.size() < 3 || l[1] != '-' || allowed.find(l[0]) == std::string::npos)
        fail("header: tag \"" + l + "\" does not follow the " + to_string(arch.tag_scheme) +
             " scheme (O or " + (arch.tag_scheme == TagScheme::kBio ? "B-/I-" : "B-/I-/E-/S-") + "TYPE)");
      tag_prefix.push_back(l[0]);
      tag_type.push_back(l.substr(2));
    }
  }

  const Json& tok_json = top.get("tokenizer");
  if (!tok_json.is_object()) fail("header: \"tokenizer\" must be an object");
  const Field t{*this, tok_json, "tokenizer."};
  t.only({"mode", "nfkc", "case_fold", "fold_digits", "keep_punctuation", "max_tokens"});
  try {
    tok_settings.mode = tokenizer_mode_from_string(t.str("mode"));
  } catch (const Error& e) {
    fail(std::string("header: \"tokenizer.mode\": ") + e.what());
  }
  tok_settings.nfkc = t.boolean("nfkc");
  tok_settings.case_fold = t.boolean("case_fold");
  tok_settings.fold_digits = t.boolean("fold_digits");
  tok_settings.keep_punctuation = t.boolean("keep_punctuation");
  tok_settings.max_tokens = t.integer("max_tokens", 0, 1e9);
  try {
    tokenizer.emplace(tok_settings);
  } catch (const Error& e) {
    fail(std::string("tokenizer: ") + e.what());
  }

  const Json& vocab_json = top.get("vocabulary");
  if (!vocab_json.is_array() || vocab_json.size() < 2)
    fail("header: \"vocabulary\" must be an array of at least 2 tokens (padding, unknown)");
  if (vocab_json.size() > (1U << 30)) fail("header: vocabulary too large");
  vocab_off.reserve(vocab_json.size() + 1);
  vocab_off.push_back(0);
  for (const Json& v : vocab_json.items()) {
    if (!v.is_string()) fail("header: every vocabulary entry must be a string");
    if (vocab_blob.size() + v.as_string().size() > std::numeric_limits<std::uint32_t>::max())
      fail("header: vocabulary too large");
    vocab_blob += v.as_string();
    vocab_off.push_back(static_cast<std::uint32_t>(vocab_blob.size()));
  }
  std::size_t cap = 16;
  while (cap < 2 * vocab_size()) cap *= 2;
  slots.assign(cap, 0);
  // Entries 0 (padding) and 1 (unknown) are placeholders and are not looked up.
  for (std::uint32_t id = 2; id < vocab_size(); ++id) {
    const std::string_view tok = vocab(id);
    for (std::size_t i = static_cast<std::size_t>(fnv1a(tok)) & (cap - 1);; i = (i + 1) & (cap - 1)) {
      if (slots[i] == 0) {
        slots[i] = id + 1;
        break;
      }
      if (vocab(slots[i] - 1) == tok) fail("header: vocabulary token \"" + std::string(tok) + "\" appears twice");
    }
  }
}

// ---- tensors ------------------------------------------------------------------------------------

Weights Model::Impl::weights(const std::string& name, std::size_t rows, std::size_t cols, bool pack) const {
  const TensorInfo& t = file.tensor(name);
  if (t.rows != rows || t.cols != cols)
    fail("tensor \"" + name + "\" has shape " + t.shape_string() + ", expected [" + std::to_string(rows) + " x " +
         std::to_string(cols) + "]");
  Weights w;
  w.dtype = t.dtype;
  w.data = t.data;
  w.scales = t.scales;
  w.rows = rows;
  w.cols = cols;
  if (t.dtype == DType::kF32 && pack) {
    w.packed.resize(detail::packed_size_f32(rows, cols));
    detail::pack_f32(static_cast<const float*>(t.data), rows, cols, w.packed.data());
  }
  if (t.dtype == DType::kF16 && pack) {
    w.packed_f16.resize(detail::packed_size_f32(rows, cols));
    detail::pack_f16(static_cast<const std::uint16_t*>(t.data), rows, cols, w.packed_f16.data());
  }
  if (t.dtype == DType::kI8 && pack && detail::best_kernels().matmul_packed_i8 != nullptr) {
    w.packed_i8.resize(detail::packed_size_i8(rows, cols));
    detail::pack_i8(static_cast<const std::int8_t*>(t.data), rows, cols, w.packed_i8.data());
  }
  if (t.dtype == DType::kI8) {
    w.sums.resize(rows);
    const auto* q = static_cast<const std::int8_t*>(t.data);
    for (std::size_t r = 0; r < rows; ++r) {
      std::int32_t s = 0;
      for (std::size_t c = 0; c < cols; ++c) s += q[r * cols + c];
      w.sums[r] = s;
    }
  }
  return w;
}

std::vector<float> Model::Impl::vector(const std::string& name, std::size_t rows, std::size_t cols) const {
  const TensorInfo& t = file.tensor(name);
  if (t.rows != rows || t.cols != cols)
    fail("tensor \"" + name + "\" has shape " + t.shape_string() + ", expected [" + std::to_string(rows) + " x " +
         std::to_string(cols) + "]");
  return file.read_f32(t);
}

void Model::Impl::load_tensors() {
  const std::size_t E = arch.embedding_size, H = arch.hidden_size, G = arch.gates(), F = arch.features();
  const std::size_t C = labels.size();
  embedding = weights("embedding.weight", vocab_size(), E, /*pack=*/false);  // rows are gathered, not multiplied
  max_input = std::max(E, F);
  layers.resize(arch.layers);
  for (std::size_t k = 0; k < arch.layers; ++k) {
    const std::size_t D = k == 0 ? E : F;
    for (std::size_t d = 0; d < arch.directions(); ++d) {
      const std::string p = "rnn.l" + std::to_string(k) + (d == 0 ? ".fwd." : ".bwd.");
      Direction dir;
      dir.w_input = weights(p + "w_input", G * H, D);
      dir.w_hidden = weights(p + "w_hidden", G * H, H);
      dir.bias = vector(p + "bias", 1, G * H);
      if (arch.cell == Cell::kGru) dir.bias_hidden = vector(p + "bias_hidden", 1, 3 * H);
      layers[k].push_back(std::move(dir));
    }
  }
  head = weights("head.weight", C, F);
  head_bias = vector("head.bias", 1, C);
  if (arch.output == Output::kCrf) {
    crf_trans = vector("crf.transitions", C, C);
    crf_start = vector("crf.start", 1, C);
    crf_end = vector("crf.end", 1, C);
  }
  kernels = &detail::best_kernels();
}

Model Model::from_file(ModelFile file) {
  auto impl = std::make_shared<Impl>(std::move(file));
  impl->parse_header();
  impl->load_tensors();
  return Model(std::move(impl));
}

Model Model::load(const std::string& path) { return from_file(ModelFile::open(path)); }
Model Model::from_buffer(const void* data, std::size_t size, std::string name) {
  return from_file(ModelFile::from_buffer(data, size, std::move(name)));
}

const Architecture& Model::architecture() const { return impl_->arch; }
const std::vector<std::string>& Model::labels() const { return impl_->labels; }
const TokenizerSettings& Model::tokenizer_settings() const { return impl_->tok_settings; }
const Tokenizer& Model::tokenizer() const { return *impl_->tokenizer; }
std::size_t Model::vocabulary_size() const { return impl_->vocab_size(); }
std::string_view Model::token(std::uint32_t id) const {
  if (id >= impl_->vocab_size()) throw Error("token id " + std::to_string(id) + " is outside the vocabulary");
  return impl_->vocab(id);
}
std::uint32_t Model::token_id(std::string_view token) const { return impl_->lookup(token); }
const ModelFile& Model::file() const { return impl_->file; }
const char* Model::kernel_name() { return detail::best_kernels().name; }

double Model::flops(std::size_t n) const {
  const auto& a = impl_->arch;
  const double H = static_cast<double>(a.hidden_size), G = static_cast<double>(a.gates());
  const double F = static_cast<double>(a.features()), C = static_cast<double>(impl_->labels.size());
  double per_token = 0.0;
  for (std::size_t k = 0; k < a.layers; ++k) {
    const double D = k == 0 ? static_cast<double>(a.embedding_size) : F;
    per_token += static_cast<double>(a.directions()) * 2.0 * G * H * (D + H);
  }
  const double head = 2.0 * C * F * (a.task == Task::kTag ? static_cast<double>(n) : 1.0);
  return per_token * static_cast<double>(n) + head;
}

// ---- context ------------------------------------------------------------------------------------

struct Context::Buffers {
  std::vector<std::string> tokens;
  std::vector<std::uint32_t> ids;
  std::vector<float> x, proj, out_a, out_b, h, c, hp, gates;
  std::vector<std::int8_t> qs;
  std::vector<std::uint8_t> qu;
  std::vector<float> qscale;
  std::vector<float> pooled, logits, probs, alpha, beta, score, score_next;
  std::vector<std::uint32_t> chosen, tags, back;
  std::vector<TagSpan> spans;
  ClassifyResult cres;
  TagResult tres;
  // step-wise state
  std::size_t steps = 0;
  std::vector<float> sh, sc, sx, sproj, spool, sdist;
};

Context::Context(const Model& model) : model_(model), b_(std::make_unique<Buffers>()) {}
Context::~Context() = default;
Context::Context(Context&&) noexcept = default;
Context& Context::operator=(Context&&) noexcept = default;

namespace {

using Impl = Model::Impl;
using Buffers = Context::Buffers;

/// y[t * ldy + r] = W_r . x_t for n rows of x [n x W.cols].
void apply(const Impl& m, const Weights& w, const float* x, std::size_t n, float* y, std::size_t ldy, Buffers& b) {
  switch (w.dtype) {
    case DType::kF32:
      m.kernels->matmul_packed_f32(w.packed.data(), w.rows, w.cols, x, n, y, ldy);
      break;
    case DType::kF16:
      m.kernels->matmul_packed_f16(w.packed_f16.data(), w.rows, w.cols, x, n, y, ldy);
      break;
    case DType::kI8: {
      ensure(b.qs, n * w.cols);
      ensure(b.qu, n * w.cols);
      ensure(b.qscale, n);
      detail::quantize_rows(x, n, w.cols, b.qs.data(), b.qu.data(), b.qscale.data());
      if (!w.packed_i8.empty()) {
        m.kernels->matmul_packed_i8(w.packed_i8.data(), w.scales, w.sums.data(), w.rows, w.cols,
                                    {b.qs.data(), b.qu.data(), b.qscale.data()}, n, y, ldy);
      } else {
        m.kernels->matmul_i8(static_cast<const std::int8_t*>(w.data), w.scales, w.sums.data(), w.rows, w.cols,
                             {b.qs.data(), b.qu.data(), b.qscale.data()}, n, y, ldy);
      }
      break;
    }
  }
}

void embed_row(const Impl& m, std::uint32_t id, float* out) {
  const Weights& e = m.embedding;
  const std::size_t E = e.cols;
  switch (e.dtype) {
    case DType::kF32: std::memcpy(out, static_cast<const float*>(e.data) + id * E, E * sizeof(float)); break;
    case DType::kF16: {
      const auto* p = static_cast<const std::uint16_t*>(e.data) + id * E;
      for (std::size_t j = 0; j < E; ++j) out[j] = detail::half_to_float(p[j]);
      break;
    }
    case DType::kI8: {
      const auto* q = static_cast<const std::int8_t*>(e.data) + id * E;
      const float s = e.scales[id];
      for (std::size_t j = 0; j < E; ++j) out[j] = static_cast<float>(q[j]) * s;
      break;
    }
  }
}

/// One recurrent step of one direction: proj = W x + b (precomputed), hp = U h (+ b_h for GRU).
/// The non-linearities run over whole gate blocks through the (vectorised) kernels.
void cell_step(const Impl& m, const Direction& dir, const float* proj, float* h, float* c, Buffers& b) {
  const std::size_t H = m.arch.hidden_size;
  float* hp = b.hp.data();
  float* g = b.gates.data();
  const auto& k = *m.kernels;
  apply(m, dir.w_hidden, h, 1, hp, dir.w_hidden.rows, b);
  if (m.arch.cell == Cell::kLstm) {
    // Rows [i f g o]; c = f*c + i*g; h = o*tanh(c) (Gers et al. 2000).
    for (std::size_t j = 0; j < 4 * H; ++j) g[j] = proj[j] + hp[j];
    k.sigmoid(g, 2 * H);
    k.tanh(g + 2 * H, H);
    k.sigmoid(g + 3 * H, H);
    for (std::size_t j = 0; j < H; ++j) c[j] = g[H + j] * c[j] + g[j] * g[2 * H + j];
    std::memcpy(g, c, H * sizeof(float));  // i is no longer needed: reuse its block for tanh(c)
    k.tanh(g, H);
    for (std::size_t j = 0; j < H; ++j) h[j] = g[3 * H + j] * g[j];
  } else {
    // Rows [r z n], reset after the recurrent product: n = tanh(W_n x + b_in + r*(U_n h + b_hn)).
    const float* bh = dir.bias_hidden.data();
    for (std::size_t j = 0; j < 2 * H; ++j) g[j] = proj[j] + hp[j] + bh[j];
    k.sigmoid(g, 2 * H);
    for (std::size_t j = 0; j < H; ++j) g[2 * H + j] = proj[2 * H + j] + g[j] * (hp[2 * H + j] + bh[2 * H + j]);
    k.tanh(g + 2 * H, H);
    for (std::size_t j = 0; j < H; ++j) h[j] = (1.0f - g[H + j]) * g[2 * H + j] + g[H + j] * h[j];
  }
}

/// Runs the RNN stack over b.ids[0..T); returns the top layer's outputs [T x F].
const float* run_stack(const Impl& m, Buffers& b, std::size_t T) {
  const auto& a = m.arch;
  const std::size_t E = a.embedding_size, H = a.hidden_size, GH = a.gates() * H, F = a.features();
  ensure(b.x, T * E);
  ensure(b.proj, T * GH);
  ensure(b.out_a, T * F);
  ensure(b.out_b, T * F);
  ensure(b.h, H);
  ensure(b.c, H);
  ensure(b.hp, GH);
  ensure(b.gates, GH);
  for (std::size_t t = 0; t < T; ++t) embed_row(m, b.ids[t], b.x.data() + t * E);
  const float* in = b.x.data();
  float* out = b.out_a.data();
  for (std::size_t k = 0; k < a.layers; ++k) {
    for (std::size_t d = 0; d < a.directions(); ++d) {
      const Direction& dir = m.layers[k][d];
      apply(m, dir.w_input, in, T, b.proj.data(), GH, b);  // all time steps in one product
      for (std::size_t t = 0; t < T; ++t) {
        float* p = b.proj.data() + t * GH;
        for (std::size_t j = 0; j < GH; ++j) p[j] += dir.bias[j];
      }
      std::fill(b.h.begin(), b.h.begin() + static_cast<std::ptrdiff_t>(H), 0.0f);
      std::fill(b.c.begin(), b.c.begin() + static_cast<std::ptrdiff_t>(H), 0.0f);
      for (std::size_t s = 0; s < T; ++s) {
        const std::size_t t = d == 0 ? s : T - 1 - s;
        cell_step(m, dir, b.proj.data() + t * GH, b.h.data(), b.c.data(), b);
        std::memcpy(out + t * F + d * H, b.h.data(), H * sizeof(float));
      }
    }
    in = out;
    out = out == b.out_a.data() ? b.out_b.data() : b.out_a.data();
  }
  return in;
}

void softmax(const float* x, float* y, std::size_t n) {
  float mx = -std::numeric_limits<float>::infinity();
  for (std::size_t i = 0; i < n; ++i) mx = std::max(mx, x[i]);
  double sum = 0.0;
  for (std::size_t i = 0; i < n; ++i) sum += std::exp(static_cast<double>(x[i] - mx));
  const double log_z = static_cast<double>(mx) + std::log(sum);
  for (std::size_t i = 0; i < n; ++i) y[i] = static_cast<float>(std::exp(static_cast<double>(x[i]) - log_z));
}

float log_sum_exp(const float* x, std::size_t n) {
  float mx = -std::numeric_limits<float>::infinity();
  for (std::size_t i = 0; i < n; ++i) mx = std::max(mx, x[i]);
  double sum = 0.0;
  for (std::size_t i = 0; i < n; ++i) sum += std::exp(static_cast<double>(x[i] - mx));
  return static_cast<float>(static_cast<double>(mx) + std::log(sum));
}

/// Head over the pooled features in b.pooled -> b.probs, b.cres.
const ClassifyResult& finish_classify(const Impl& m, Buffers& b, std::size_t tokens) {
  const std::size_t C = m.labels.size();
  ensure(b.logits, C);
  ensure(b.probs, C);
  ensure(b.chosen, C);
  apply(m, m.head, b.pooled.data(), 1, b.logits.data(), C, b);
  for (std::size_t i = 0; i < C; ++i) b.logits[i] += m.head_bias[i];
  std::size_t n_chosen = 0;
  std::uint32_t best = 0;
  if (m.arch.output == Output::kSigmoid) {
    for (std::size_t i = 0; i < C; ++i) b.probs[i] = sigmoid(b.logits[i]);
  } else {
    softmax(b.logits.data(), b.probs.data(), C);
  }
  for (std::uint32_t i = 1; i < C; ++i)
    if (b.probs[i] > b.probs[best]) best = i;
  if (m.arch.output == Output::kSigmoid) {
    for (std::uint32_t i = 0; i < C; ++i)
      if (b.probs[i] >= m.arch.multi_label_threshold) b.chosen[n_chosen++] = i;
  } else {
    b.chosen[n_chosen++] = best;
  }
  b.cres.probabilities = Span<const float>(b.probs.data(), C);
  b.cres.best = best;
  b.cres.chosen = Span<const std::uint32_t>(b.chosen.data(), n_chosen);
  b.cres.token_count = tokens;
  return b.cres;
}

void check_ids(const Impl& m, Span<const std::uint32_t> ids) {
  for (std::size_t i = 0; i < ids.size(); ++i)
    if (ids[i] >= m.vocab_size())
      throw Error("token id " + std::to_string(ids[i]) + " at position " + std::to_string(i) +
                  " is outside the vocabulary (" + std::to_string(m.vocab_size()) + " tokens)");
}

void extract_spans(const Impl& m, Buffers& b, std::size_t T) {
  if (b.spans.capacity() < T) b.spans.reserve(T);  // at most one span per token: no growth later
  if (m.arch.tag_scheme == TagScheme::kNone) {
    b.spans.clear();
    return;
  }
  detail::extract_spans(m.tag_prefix, m.tag_type, b.tags.data(), T, b.spans);
}

const TagResult& finish_tag(const Impl& m, Buffers& b, const float* top, std::size_t T) {
  const std::size_t C = m.labels.size();
  ensure(b.logits, T * C);
  ensure(b.probs, T * C);
  ensure(b.tags, T);
  if (T > 0) apply(m, m.head, top, T, b.logits.data(), C, b);
  for (std::size_t t = 0; t < T; ++t)
    for (std::size_t i = 0; i < C; ++i) b.logits[t * C + i] += m.head_bias[i];
  float* e = b.logits.data();
  if (m.arch.output != Output::kCrf) {
    for (std::size_t t = 0; t < T; ++t) {
      softmax(e + t * C, b.probs.data() + t * C, C);
      std::uint32_t best = 0;
      for (std::uint32_t i = 1; i < C; ++i)
        if (e[t * C + i] > e[t * C + best]) best = i;
      b.tags[t] = best;
    }
  } else if (T > 0) {
    // Viterbi (Lafferty et al. 2001): score(y) = start[y0] + sum e[t][yt] + sum trans[y(t-1)][yt] + end[y(T-1)].
    const float* tr = m.crf_trans.data();
    ensure(b.score, C);
    ensure(b.score_next, C);
    ensure(b.back, T * C);
    for (std::size_t j = 0; j < C; ++j) b.score[j] = m.crf_start[j] + e[j];
    for (std::size_t t = 1; t < T; ++t) {
      for (std::size_t j = 0; j < C; ++j) {
        std::uint32_t arg = 0;
        float best = b.score[0] + tr[j];
        for (std::uint32_t i = 1; i < C; ++i) {
          const float s = b.score[i] + tr[i * C + j];
          if (s > best) {
            best = s;
            arg = i;
          }
        }
        b.score_next[j] = best + e[t * C + j];
        b.back[t * C + j] = arg;
      }
      std::swap(b.score, b.score_next);
    }
    std::uint32_t last = 0;
    for (std::uint32_t j = 1; j < C; ++j)
      if (b.score[j] + m.crf_end[j] > b.score[last] + m.crf_end[last]) last = j;
    b.tags[T - 1] = last;
    for (std::size_t t = T - 1; t > 0; --t) b.tags[t - 1] = b.back[t * C + b.tags[t]];
    // Posterior marginals by forward-backward in log space.
    ensure(b.alpha, T * C);
    ensure(b.beta, T * C);
    float* al = b.alpha.data();
    float* be = b.beta.data();
    float* tmp = b.score.data();
    for (std::size_t j = 0; j < C; ++j) al[j] = m.crf_start[j] + e[j];
    for (std::size_t t = 1; t < T; ++t)
      for (std::size_t j = 0; j < C; ++j) {
        for (std::size_t i = 0; i < C; ++i) tmp[i] = al[(t - 1) * C + i] + tr[i * C + j];
        al[t * C + j] = e[t * C + j] + log_sum_exp(tmp, C);
      }
    for (std::size_t j = 0; j < C; ++j) be[(T - 1) * C + j] = m.crf_end[j];
    for (std::size_t t = T - 1; t > 0; --t)
      for (std::size_t i = 0; i < C; ++i) {
        for (std::size_t j = 0; j < C; ++j) tmp[j] = tr[i * C + j] + e[t * C + j] + be[t * C + j];
        be[(t - 1) * C + i] = log_sum_exp(tmp, C);
      }
    for (std::size_t j = 0; j < C; ++j) tmp[j] = al[(T - 1) * C + j] + m.crf_end[j];
    const float log_z = log_sum_exp(tmp, C);
    for (std::size_t t = 0; t < T; ++t)
      for (std::size_t j = 0; j < C; ++j) b.probs[t * C + j] = std::exp(al[t * C + j] + be[t * C + j] - log_z);
  }
  extract_spans(m, b, T);
  b.tres.tags = Span<const std::uint32_t>(b.tags.data(), T);
  b.tres.probabilities = Span<const float>(b.probs.data(), T * C);
  b.tres.spans = Span<const TagSpan>(b.spans.data(), b.spans.size());
  return b.tres;
}

void tokens_to_ids(const Impl& m, Buffers& b, Span<const std::string> tokens) {
  ensure(b.ids, tokens.size());
  for (std::size_t i = 0; i < tokens.size(); ++i) b.ids[i] = m.lookup(tokens[i]);
}

}  // namespace

const ClassifyResult& Context::classify_ids(Span<const std::uint32_t> ids) {
  const Impl& m = *model_.impl_;
  if (m.arch.task != Task::kClassify) throw Error("classify: this model is a tagger; use tag()");
  check_ids(m, ids);
  Buffers& b = *b_;
  const std::size_t T = ids.size(), H = m.arch.hidden_size, F = m.arch.features();
  ensure(b.ids, T);
  if (T) std::memcpy(b.ids.data(), ids.data(), T * sizeof(std::uint32_t));
  ensure(b.pooled, F);
  std::fill(b.pooled.begin(), b.pooled.begin() + static_cast<std::ptrdiff_t>(F), 0.0f);
  if (T > 0) {
    const float* top = run_stack(m, b, T);
    switch (m.arch.pooling) {
      case Pooling::kLast:
        std::memcpy(b.pooled.data(), top + (T - 1) * F, H * sizeof(float));
        if (m.arch.bidirectional) std::memcpy(b.pooled.data() + H, top + H, H * sizeof(float));
        break;
      case Pooling::kMean:
        for (std::size_t t = 0; t < T; ++t)
          for (std::size_t j = 0; j < F; ++j) b.pooled[j] += top[t * F + j];
        for (std::size_t j = 0; j < F; ++j) b.pooled[j] /= static_cast<float>(T);
        break;
      case Pooling::kMax:
        std::memcpy(b.pooled.data(), top, F * sizeof(float));
        for (std::size_t t = 1; t < T; ++t)
          for (std::size_t j = 0; j < F; ++j) b.pooled[j] = std::max(b.pooled[j], top[t * F + j]);
        break;
    }
  }
  return finish_classify(m, b, T);
}

const ClassifyResult& Context::classify_tokens(Span<const std::string> tokens) {
  tokens_to_ids(*model_.impl_, *b_, tokens);
  return classify_ids(Span<const std::uint32_t>(b_->ids.data(), tokens.size()));
}

const ClassifyResult& Context::classify(std::string_view text) {
  model_.impl_->tokenizer->tokenize(text, b_->tokens);
  return classify_tokens(Span<const std::string>(b_->tokens.data(), b_->tokens.size()));
}

const TagResult& Context::tag_ids(Span<const std::uint32_t> ids) {
  const Impl& m = *model_.impl_;
  if (m.arch.task != Task::kTag) throw Error("tag: this model is a classifier; use classify()");
  check_ids(m, ids);
  Buffers& b = *b_;
  const std::size_t T = ids.size();
  ensure(b.ids, T);
  if (T) std::memcpy(b.ids.data(), ids.data(), T * sizeof(std::uint32_t));
  const float* top = T > 0 ? run_stack(m, b, T) : nullptr;
  b.tres.tokens = {};
  return finish_tag(m, b, top, T);
}

const TagResult& Context::tag_tokens(Span<const std::string> tokens) {
  tokens_to_ids(*model_.impl_, *b_, tokens);
  tag_ids(Span<const std::uint32_t>(b_->ids.data(), tokens.size()));
  b_->tres.tokens = tokens;
  return b_->tres;
}

const TagResult& Context::tag(std::string_view text) {
  model_.impl_->tokenizer->tokenize(text, b_->tokens);
  return tag_tokens(Span<const std::string>(b_->tokens.data(), b_->tokens.size()));
}

// ---- step-wise ----------------------------------------------------------------------------------

void Context::reset() {
  const Impl& m = *model_.impl_;
  if (m.arch.bidirectional)
    throw Error("step-wise inference needs a unidirectional model; this one is bidirectional (use classify/tag)");
  Buffers& b = *b_;
  const std::size_t L = m.arch.layers, H = m.arch.hidden_size, GH = m.arch.gates() * H;
  const std::size_t C = m.labels.size();
  ensure(b.sh, L * H);
  ensure(b.sc, L * H);
  ensure(b.sx, std::max(m.arch.embedding_size, H));
  ensure(b.sproj, GH);
  ensure(b.spool, H);
  ensure(b.sdist, C);
  ensure(b.hp, GH);
  ensure(b.gates, GH);
  ensure(b.alpha, C);
  ensure(b.score, C);
  ensure(b.logits, C);
  std::fill(b.sh.begin(), b.sh.end(), 0.0f);
  std::fill(b.sc.begin(), b.sc.end(), 0.0f);
  std::fill(b.spool.begin(), b.spool.end(), 0.0f);
  b.steps = 0;
}

Span<const float> Context::push(std::string_view token) { return push_id(model_.impl_->lookup(token)); }

Span<const float> Context::push_id(std::uint32_t id) {
  const Impl& m = *model_.impl_;
  Buffers& b = *b_;
  if (b.sh.empty()) reset();  // first use
  if (id >= m.vocab_size()) throw Error("token id " + std::to_string(id) + " is outside the vocabulary");
  const std::size_t H = m.arch.hidden_size, GH = m.arch.gates() * H;
  embed_row(m, id, b.sx.data());
  const float* in = b.sx.data();
  for (std::size_t k = 0; k < m.arch.layers; ++k) {
    const Direction& dir = m.layers[k][0];
    apply(m, dir.w_input, in, 1, b.sproj.data(), GH, b);
    for (std::size_t j = 0; j < GH; ++j) b.sproj[j] += dir.bias[j];
    cell_step(m, dir, b.sproj.data(), b.sh.data() + k * H, b.sc.data() + k * H, b);
    in = b.sh.data() + k * H;
  }
  ++b.steps;
  const float* top = in;
  const std::size_t C = m.labels.size();
  if (m.arch.task == Task::kClassify) {
    switch (m.arch.pooling) {
      case Pooling::kLast: std::memcpy(b.spool.data(), top, H * sizeof(float)); break;
      case Pooling::kMean:
        for (std::size_t j = 0; j < H; ++j) b.spool[j] += top[j];
        break;
      case Pooling::kMax:
        for (std::size_t j = 0; j < H; ++j) b.spool[j] = b.steps == 1 ? top[j] : std::max(b.spool[j], top[j]);
        break;
    }
    return distribution();
  }
  // Tagger: the newest token's scores.
  apply(m, m.head, top, 1, b.logits.data(), C, b);
  for (std::size_t i = 0; i < C; ++i) b.logits[i] += m.head_bias[i];
  if (m.arch.output != Output::kCrf) {
    softmax(b.logits.data(), b.sdist.data(), C);
  } else {
    // Forward recursion: alpha_t(j) = e_t(j) + logsumexp_i(alpha_{t-1}(i) + trans(i, j)).
    if (b.steps == 1) {
      for (std::size_t j = 0; j < C; ++j) b.alpha[j] = m.crf_start[j] + b.logits[j];
    } else {
      for (std::size_t j = 0; j < C; ++j) {
        for (std::size_t i = 0; i < C; ++i) b.score[i] = b.alpha[i] + m.crf_trans[i * C + j];
        b.sdist[j] = b.logits[j] + log_sum_exp(b.score.data(), C);
      }
      std::copy(b.sdist.begin(), b.sdist.begin() + static_cast<std::ptrdiff_t>(C), b.alpha.begin());
    }
    softmax(b.alpha.data(), b.sdist.data(), C);
  }
  return Span<const float>(b.sdist.data(), C);
}

Span<const float> Context::distribution() {
  const Impl& m = *model_.impl_;
  Buffers& b = *b_;
  if (b.sh.empty()) reset();
  const std::size_t C = m.labels.size();
  if (m.arch.task == Task::kTag) {
    if (b.steps == 0) return {};
    return Span<const float>(b.sdist.data(), C);
  }
  const std::size_t H = m.arch.hidden_size;
  ensure(b.pooled, H);
  for (std::size_t j = 0; j < H; ++j)
    b.pooled[j] = m.arch.pooling == Pooling::kMean && b.steps > 0 ? b.spool[j] / static_cast<float>(b.steps) : b.spool[j];
  const ClassifyResult& r = finish_classify(m, b, b.steps);
  return r.probabilities;
}

std::size_t Context::steps() const { return b_->steps; }

}  // namespace gyre::runtime
