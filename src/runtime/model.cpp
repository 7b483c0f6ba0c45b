// Model loading (header schema in docs/model-format.md) and the forward pass: embedding (joined
// with the character encoder's features when the model has one) -> LSTM/GRU stack -> pooling ->
// head, exactly as DEVELOPERS.md ("Numerical conventions") defines it.

#include "gyre/runtime/model.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <optional>

#include "gyre/runtime/calibration.hpp"
#include "gyre/runtime/char_tokens.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "gyre/runtime/ngram_part_file.hpp"
#include "runtime/detail/half.hpp"
#include "runtime/detail/kernels.hpp"
#include "runtime/detail/spans.hpp"

namespace gyre::runtime {

namespace {

/// A weight matrix viewed in the file's bytes.
struct Weights {
  DType dtype = DType::kF32;
  const void* data = nullptr;
  const float* scales = nullptr;
  std::vector<std::int32_t> sums;         // i8: per-row sum of q (VNNI correction)
  std::vector<float> packed;              // f32: panel layout for matmul_packed_f32 (one copy at load)
  std::vector<std::int8_t> packed_i8;     // i8: VNNI operand layout, when the kernels have one
  std::vector<std::uint16_t> packed_f16;  // f16: panel layout
  std::size_t rows = 0, cols = 0;
};

struct Direction {
  Weights w_input, w_hidden;
  std::vector<float> bias, bias_hidden;
};

inline float sigmoid(float x) {
  return 1.0f / (1.0f + std::exp(-x));
}

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
  // Character encoder (arch.has_char_encoder()): its small tensors decoded to f32 at load.
  CharacterIds characters;
  std::optional<Tokenizer> surface_tokenizer;
  std::vector<float> char_embedding;  // [Vc x Ec]
  std::vector<float> char_conv;       // [Fc x w*Ec], window slot k at columns [k*Ec, (k+1)*Ec)
  std::vector<float> char_bias;       // [Fc]
  // N-gram part (arch.has_ngram_part()): keys decoded at load; weights f32 (from f32/f16 files) or,
  // from an int8 file, kept as int8 with their per-class scales (NgramPart::quantized()).
  NgramPart ngram;

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

void Model::Impl::parse_header() {
  ModelHeader h = parse_model_header(file.header_json(), file.name());
  if (h.format != "gyre-model")
    fail("a training checkpoint, not an exported model (run `gyre export` on it for the runtime)");
  check_model_tensors(h, file);  // before anything below allocates from the header's sizes
  ngram = read_ngram_part(h, file, /*keep_int8=*/true);
  arch = h.architecture;
  labels = std::move(h.labels);
  tok_settings = h.tokenizer;
  if (arch.task == Task::kTag) {
    for (const std::string& l : labels) {
      // Without a scheme every label but O is a one-token span type (parse_model_header checked
      // that the tags of a scheme have the form P-TYPE).
      const bool plain = arch.tag_scheme == TagScheme::kNone || l == "O";
      tag_prefix.push_back(l == "O" ? 'O' : plain ? 'S' : l[0]);
      tag_type.push_back(l == "O" ? "" : plain ? l : l.substr(2));
    }
  }
  try {
    tokenizer.emplace(tok_settings);
    if (arch.has_char_encoder()) surface_tokenizer.emplace(surface_settings(tok_settings));
  } catch (const Error& e) {
    fail(std::string("tokenizer: ") + e.what());
  }
  if (arch.has_char_encoder()) {
    if (!tokenizer_has_icu())
      fail(
          "the model has a character encoder, which reads grapheme clusters: this runtime was built "
          "without ICU (GYRE_RUNTIME_ICU=OFF)");
    characters = CharacterIds(h.characters);
  }
  std::size_t blob = 0;
  for (const std::string& t : h.vocabulary) blob += t.size();
  if (blob > std::numeric_limits<std::uint32_t>::max()) fail("header: vocabulary too large");
  vocab_blob.reserve(blob);
  vocab_off.reserve(h.vocabulary.size() + 1);
  vocab_off.push_back(0);
  for (const std::string& t : h.vocabulary) {
    vocab_blob += t;
    vocab_off.push_back(static_cast<std::uint32_t>(vocab_blob.size()));
  }
  std::size_t cap = 16;
  while (cap < 2 * vocab_size()) cap *= 2;
  slots.assign(cap, 0);
  // Entries 0 (padding) and 1 (unknown) are placeholders and are not looked up; the header
  // reader has checked that tokens are unique.
  for (std::uint32_t id = 2; id < vocab_size(); ++id) {
    const std::string_view tok = vocab(id);
    std::size_t i = static_cast<std::size_t>(fnv1a(tok)) & (cap - 1);
    while (slots[i] != 0) i = (i + 1) & (cap - 1);
    slots[i] = id + 1;
  }
}

// ---- tensors ------------------------------------------------------------------------------------

Weights Model::Impl::weights(const std::string& name, std::size_t rows, std::size_t cols, bool pack) const {
  const TensorInfo& t = file.tensor(name);
  if (t.rows != rows || t.cols != cols)
    fail("tensor \"" + name + "\" has shape " + t.shape_string() + ", expected [" + std::to_string(rows) +
         " x " + std::to_string(cols) + "]");
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
    fail("tensor \"" + name + "\" has shape " + t.shape_string() + ", expected [" + std::to_string(rows) +
         " x " + std::to_string(cols) + "]");
  return file.read_f32(t);
}

void Model::Impl::load_tensors() {
  const std::size_t E = arch.embedding_size, H = arch.hidden_size, G = arch.gates(), F = arch.features();
  const std::size_t C = labels.size();
  embedding =
      weights("tokens.vectors", vocab_size(), E, /*pack=*/false);  // rows are gathered, not multiplied
  max_input = std::max(arch.input_size(), F);
  if (arch.has_char_encoder()) {
    const std::size_t Ec = arch.char_embedding_size;
    char_embedding = vector("chars.vectors", characters.size(), Ec);
    char_conv = vector("chars.w_filter", arch.char_filters, arch.char_width * Ec);
    char_bias = vector("chars.b_filter", 1, arch.char_filters);
  }
  layers.resize(arch.layers);
  for (std::size_t k = 0; k < arch.layers; ++k) {
    const std::size_t D = k == 0 ? arch.input_size() : F;
    for (std::size_t d = 0; d < arch.directions(); ++d) {
      const std::string p = "rnn.l" + std::to_string(k) + (d == 0 ? ".fwd." : ".bwd.");
      Direction dir;
      dir.w_input = weights(p + "w_input", G * H, D);
      dir.w_hidden = weights(p + "w_hidden", G * H, H);
      dir.bias = vector(p + "b_input", 1, G * H);
      if (arch.cell == Cell::kGru) dir.bias_hidden = vector(p + "b_hidden", 1, 3 * H);
      layers[k].push_back(std::move(dir));
    }
  }
  head = weights("readout.w", C, F);
  head_bias = vector("readout.b", 1, C);
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

Model Model::load(const std::string& path) {
  return from_file(ModelFile::open(path));
}
Model Model::from_buffer(const void* data, std::size_t size, std::string name) {
  return from_file(ModelFile::from_buffer(data, size, std::move(name)));
}

const Architecture& Model::architecture() const {
  return impl_->arch;
}
const std::vector<std::string>& Model::labels() const {
  return impl_->labels;
}
const NgramPart& Model::ngram_part() const {
  return impl_->ngram;
}
const TokenizerSettings& Model::tokenizer_settings() const {
  return impl_->tok_settings;
}
const Tokenizer& Model::tokenizer() const {
  return *impl_->tokenizer;
}
std::size_t Model::vocabulary_size() const {
  return impl_->vocab_size();
}
std::string_view Model::token(std::uint32_t id) const {
  if (id >= impl_->vocab_size()) throw Error("token id " + std::to_string(id) + " is outside the vocabulary");
  return impl_->vocab(id);
}
std::size_t Model::character_count() const {
  return impl_->characters.size();
}

std::uint32_t Model::token_id(std::string_view token) const {
  return impl_->lookup(token);
}
const ModelFile& Model::file() const {
  return impl_->file;
}
const char* Model::kernel_name() {
  return detail::best_kernels().name;
}

double Model::flops(std::size_t n) const {
  const auto& a = impl_->arch;
  const double H = static_cast<double>(a.hidden_size), G = static_cast<double>(a.gates());
  const double F = static_cast<double>(a.features()), C = static_cast<double>(impl_->labels.size());
  double per_token = 0.0;
  for (std::size_t k = 0; k < a.layers; ++k) {
    const double D = k == 0 ? static_cast<double>(a.input_size()) : F;
    per_token += static_cast<double>(a.directions()) * 2.0 * G * H * (D + H);
  }
  // Character encoder, counted at kTypicalChars characters per token (our estimate for words of
  // running text; the true count depends on the input).
  constexpr double kTypicalChars = 6.0;
  if (a.has_char_encoder())
    per_token +=
        kTypicalChars * 2.0 * static_cast<double>(a.char_filters * a.char_width * a.char_embedding_size);
  const double head = 2.0 * C * F * (a.task == Task::kTag ? static_cast<double>(n) : 1.0);
  return per_token * static_cast<double>(n) + head;
}

// ---- context ------------------------------------------------------------------------------------

struct Context::Buffers {
  std::vector<std::string> tokens;
  std::vector<ByteRange> token_bytes;  // tag(text): where each token came from
  std::vector<std::uint32_t> ids;
  // Character encoder: surface tokens, character ids of token i at char_ids[char_off[i] ..
  // char_off[i+1]), scratch for clusters, one window and the running maxima.
  std::vector<std::string> surfaces;
  std::vector<std::string_view> clusters;
  std::vector<std::int32_t> char_ids, char_off;
  std::vector<float> cwin, cmax;
  std::vector<float> x, proj, out_a, out_b, h, c, hp, gates;
  std::vector<std::int8_t> qs;
  std::vector<std::uint8_t> qu;
  std::vector<float> qscale;
  std::vector<float> pooled, logits, probs, alpha, beta, score, score_next;
  std::vector<std::uint32_t> chosen, tags, back, occlusion_ids;
  std::vector<std::int32_t> occlusion_chars, occlusion_char_off;  // the whole text's characters
  std::vector<float> occlusion;
  std::vector<TagSpan> spans;
  // N-gram part: the words it reads when the caller gave tokens as written (character encoder) or
  // pushed them one by one, its scratch, and mix * (W x + b) of the current text [C] / of each
  // text of a batch [B x C].
  std::vector<std::string> words, swords;
  NgramScratch nscratch;
  std::vector<float> ngram, bngram;
  ClassifyResult cres;
  TagResult tres;
  bool calibrated = true;  // apply the header's temperature (set_calibrated)
  // Batched calls: per text its first token in the flat batch, its length and the order by
  // length; the inputs, projections and outputs of all tokens [N x ...]; the states of the texts
  // in length order [B x H]; the results.
  std::vector<std::size_t> boff, blen, border;
  std::size_t btotal = 0;  // tokens in the batch
  std::vector<float> bx, bproj, bout_a, bout_b, bh, bc, bhp;
  std::vector<float> bpooled, blogits, bprobs;
  std::vector<std::uint32_t> bchosen, btags;
  std::vector<std::string> btokens;  // tag_batch(texts): the tokens of every text, flat
  std::vector<ByteRange> bbytes;
  std::vector<TagSpan> bspans;
  std::vector<std::size_t> bspan_off;
  std::vector<ClassifyResult> bcres;
  std::vector<TagResult> btres;
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
void apply(const Impl& m, const Weights& w, const float* x, std::size_t n, float* y, std::size_t ldy,
           Buffers& b) {
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
    case DType::kU8:  // refused for weights by check_model_tensors
      break;
  }
}

void embed_row(const Impl& m, std::uint32_t id, float* out) {
  const Weights& e = m.embedding;
  const std::size_t E = e.cols;
  switch (e.dtype) {
    case DType::kF32:
      std::memcpy(out, static_cast<const float*>(e.data) + id * E, E * sizeof(float));
      break;
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
    case DType::kU8:  // refused for weights by check_model_tensors
      break;
  }
}

/// The gate arithmetic of one recurrent step of one direction, given proj = W x + b and hp = U h
/// (the GRU adds b_hidden here); g is scratch of G*H floats. The non-linearities run over whole
/// gate blocks through the (vectorised) kernels. Shared by the one-text and the batched paths, so
/// a text's state evolves identically in both.
void cell_update(const Impl& m, const Direction& dir, const float* proj, const float* hp, float* h, float* c,
                 float* g) {
  const std::size_t H = m.arch.hidden_size;
  const auto& k = *m.kernels;
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
    // Rows [r z h~], reset after the recurrent product:
    // h~ = tanh(W[h~] x + b_input[h~] + r * (U[h~] h + b_hidden[h~])).
    const float* bh = dir.bias_hidden.data();
    for (std::size_t j = 0; j < 2 * H; ++j) g[j] = proj[j] + hp[j] + bh[j];
    k.sigmoid(g, 2 * H);
    for (std::size_t j = 0; j < H; ++j)
      g[2 * H + j] = proj[2 * H + j] + g[j] * (hp[2 * H + j] + bh[2 * H + j]);
    k.tanh(g + 2 * H, H);
    for (std::size_t j = 0; j < H; ++j) h[j] = (1.0f - g[H + j]) * g[2 * H + j] + g[H + j] * h[j];
  }
}

/// One recurrent step of one direction: proj = W x + b (precomputed), hp = U h, then the gates.
void cell_step(const Impl& m, const Direction& dir, const float* proj, float* h, float* c, Buffers& b) {
  apply(m, dir.w_hidden, h, 1, b.hp.data(), dir.w_hidden.rows, b);
  cell_update(m, dir, proj, b.hp.data(), h, c, b.gates.data());
}

/// The character encoder's features of token t (char_ids[char_off[t] .. char_off[t+1])):
///   out_f = tanh( max_p ( bias_f + sum_k W_f[k] . emb[c_{p-h+k}] ) ),  zero positions outside
/// the token, w = 2h + 1 (Kim et al. 2016 eq. 1-2; nn::CharCnn in the training library). A token
/// without characters gets zeros. Plain loops: the encoder is small next to the recurrent stack.
void char_features(const Impl& m, Buffers& b, const std::int32_t* char_ids, const std::int32_t* char_off,
                   std::size_t t, float* out) {
  const auto& a = m.arch;
  const std::size_t Ec = a.char_embedding_size, Fc = a.char_filters, w = a.char_width, half = w / 2;
  const auto begin = static_cast<std::size_t>(char_off[t]), end = static_cast<std::size_t>(char_off[t + 1]);
  if (begin == end) {
    std::fill(out, out + Fc, 0.0f);
    return;
  }
  const std::size_t L = end - begin;
  ensure(b.cwin, w * Ec);
  ensure(b.cmax, Fc);
  for (std::size_t p = 0; p < L; ++p) {
    for (std::size_t k = 0; k < w; ++k) {
      float* slot = b.cwin.data() + k * Ec;
      const std::size_t q = p + k;  // position p - half + k, shifted by half to stay unsigned
      if (q < half || q - half >= L) {
        std::fill(slot, slot + Ec, 0.0f);
      } else {
        const auto id = static_cast<std::size_t>(char_ids[begin + q - half]);
        std::memcpy(slot, m.char_embedding.data() + id * Ec, Ec * sizeof(float));
      }
    }
    for (std::size_t f = 0; f < Fc; ++f) {
      const float* wf = m.char_conv.data() + f * w * Ec;
      float s = m.char_bias[f];
      for (std::size_t j = 0; j < w * Ec; ++j) s += wf[j] * b.cwin[j];
      if (p == 0 || s > b.cmax[f]) b.cmax[f] = s;
    }
  }
  for (std::size_t f = 0; f < Fc; ++f) out[f] = std::tanh(b.cmax[f]);
}

/// Input row of token t: [word embedding, character features].
void input_row(const Impl& m, Buffers& b, std::size_t t, float* out) {
  embed_row(m, b.ids[t], out);
  if (m.arch.has_char_encoder())
    char_features(m, b, b.char_ids.data(), b.char_off.data(), t, out + m.arch.embedding_size);
}

/// Runs the RNN stack over b.ids[0..T) (and their characters); returns the top layer's outputs
/// [T x F].
const float* run_stack(const Impl& m, Buffers& b, std::size_t T) {
  const auto& a = m.arch;
  const std::size_t E = a.input_size(), H = a.hidden_size, GH = a.gates() * H, F = a.features();
  ensure(b.x, T * E);
  ensure(b.proj, T * GH);
  ensure(b.out_a, T * F);
  ensure(b.out_b, T * F);
  ensure(b.h, H);
  ensure(b.c, H);
  ensure(b.hp, GH);
  ensure(b.gates, GH);
  for (std::size_t t = 0; t < T; ++t) input_row(m, b, t, b.x.data() + t * E);
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

/// Probabilities, arg-max and chosen labels of one text from its logits (head output plus bias).
void decide_classify(const Impl& m, bool calibrated, const float* logits, float* probs, std::uint32_t* chosen,
                     const float* features, std::size_t tokens, ClassifyResult& res) {
  const std::size_t C = m.labels.size();
  std::size_t n_chosen = 0;
  std::uint32_t best = 0;
  const std::vector<float>& temp = m.arch.temperature;
  const bool tempered = calibrated && !temp.empty();
  if (m.arch.output == Output::kSigmoid) {
    for (std::size_t i = 0; i < C; ++i)
      probs[i] = tempered ? tempered_sigmoid(logits[i], temp[i]) : sigmoid(logits[i]);
  } else if (tempered) {
    tempered_softmax(logits, C, temp[0], probs);
  } else {
    softmax(logits, probs, C);
  }
  for (std::uint32_t i = 1; i < C; ++i)
    if (probs[i] > probs[best]) best = i;
  if (m.arch.output == Output::kSigmoid) {
    for (std::uint32_t i = 0; i < C; ++i)
      if (probs[i] >= m.arch.threshold_of(i)) chosen[n_chosen++] = i;
  } else {
    chosen[n_chosen++] = best;
  }
  res.probabilities = Span<const float>(probs, C);
  res.logits = Span<const float>(logits, C);
  res.features = Span<const float>(features, m.arch.features());
  res.best = best;
  res.chosen = Span<const std::uint32_t>(chosen, n_chosen);
  res.token_count = tokens;
}

/// out[c] = mix * (W x + b)[c] of the n-gram part over words[0 .. T) (without the n-grams of word
/// `skip`, see NgramPart::add_scores); the logits then get out added, which gives the same floats as
/// adding the scores to the logits directly.
void ngram_scores(const Impl& m, Buffers& b, const std::string* words, std::size_t T, float* out,
                  std::size_t skip = NgramPart::kKeepAll) {
  std::fill(out, out + m.labels.size(), 0.0f);
  m.ngram.add_scores(words, T, out, b.nscratch, skip);
}

/// Head over the pooled features in b.pooled -> b.probs, b.cres; with an n-gram part, b.ngram
/// (ngram_scores of the same text) is added to the logits.
const ClassifyResult& finish_classify(const Impl& m, Buffers& b, std::size_t tokens) {
  const std::size_t C = m.labels.size();
  ensure(b.logits, C);
  ensure(b.probs, C);
  ensure(b.chosen, C);
  apply(m, m.head, b.pooled.data(), 1, b.logits.data(), C, b);
  for (std::size_t i = 0; i < C; ++i) b.logits[i] += m.head_bias[i];
  if (!m.ngram.empty())
    for (std::size_t i = 0; i < C; ++i) b.logits[i] += b.ngram[i];
  decide_classify(m, b.calibrated, b.logits.data(), b.probs.data(), b.chosen.data(), b.pooled.data(), tokens,
                  b.cres);
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

/// Tags and per-token distributions of one text from its emissions e [T x C] (head output plus
/// bias): softmax and arg-max, or CRF Viterbi and posterior marginals; scratch from b.
void decode_tags(const Impl& m, Buffers& b, const float* e, std::size_t T, float* probs,
                 std::uint32_t* tags) {
  const std::size_t C = m.labels.size();
  if (m.arch.output != Output::kCrf) {
    const bool tempered = b.calibrated && !m.arch.temperature.empty();
    for (std::size_t t = 0; t < T; ++t) {
      if (tempered)
        tempered_softmax(e + t * C, C, m.arch.temperature[0], probs + t * C);
      else
        softmax(e + t * C, probs + t * C, C);
      std::uint32_t best = 0;
      for (std::uint32_t i = 1; i < C; ++i)
        if (e[t * C + i] > e[t * C + best]) best = i;
      tags[t] = best;
    }
  } else if (T > 0) {
    // Viterbi (Lafferty et al. 2001): score(y) = start[y0] + sum e[t][yt] + sum trans[y(t-1)][yt] +
    // end[y(T-1)].
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
    tags[T - 1] = last;
    for (std::size_t t = T - 1; t > 0; --t) tags[t - 1] = b.back[t * C + tags[t]];
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
      for (std::size_t j = 0; j < C; ++j) probs[t * C + j] = std::exp(al[t * C + j] + be[t * C + j] - log_z);
  }
  if (m.arch.output == Output::kCrf && b.calibrated && !m.arch.temperature.empty())
    for (std::size_t t = 0; t < T; ++t) temper_distribution(probs + t * C, C, m.arch.temperature[0]);
}

const TagResult& finish_tag(const Impl& m, Buffers& b, const float* top, std::size_t T) {
  const std::size_t C = m.labels.size();
  ensure(b.logits, T * C);
  ensure(b.probs, T * C);
  ensure(b.tags, T);
  if (T > 0) apply(m, m.head, top, T, b.logits.data(), C, b);
  for (std::size_t t = 0; t < T; ++t)
    for (std::size_t i = 0; i < C; ++i) b.logits[t * C + i] += m.head_bias[i];
  decode_tags(m, b, b.logits.data(), T, b.probs.data(), b.tags.data());
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

/// Character ids of the surface tokens into b.char_ids / b.char_off.
void surfaces_to_chars(const Impl& m, Buffers& b, Span<const std::string> surfaces) {
  b.char_ids.clear();
  b.char_off.assign(1, 0);
  for (const std::string& s : surfaces) {
    m.characters.append_ids(s, b.char_ids, b.clusters);
    b.char_off.push_back(static_cast<std::int32_t>(b.char_ids.size()));
  }
}

/// A character-encoder model given tokens as written: the word of each is its normalized form
/// (as for a tagging corpus in training, data::Encoder), the characters those of its NFKC form.
void tokens_with_chars(const Impl& m, Buffers& b, Span<const std::string> tokens) {
  ensure(b.ids, tokens.size());
  b.surfaces.resize(tokens.size());
  ensure(b.words, tokens.size());
  for (std::size_t i = 0; i < tokens.size(); ++i) {
    b.words[i] = m.tokenizer->normalize(tokens[i]);
    b.ids[i] = m.lookup(b.words[i]);
    b.surfaces[i] = m.surface_tokenizer->normalize(tokens[i]);
  }
  surfaces_to_chars(m, b, Span<const std::string>(b.surfaces.data(), tokens.size()));
}

/// A character-encoder model given text: b.tokens (words), b.ids and the characters.
/// With `ranges`, also where each token came from in text.
void text_with_chars(const Impl& m, Buffers& b, std::string_view text,
                     std::vector<ByteRange>* ranges = nullptr) {
  tokenize_with_surface(*m.tokenizer, *m.surface_tokenizer, text, b.tokens, b.surfaces, ranges);
  tokens_to_ids(m, b, Span<const std::string>(b.tokens.data(), b.tokens.size()));
  surfaces_to_chars(m, b, Span<const std::string>(b.surfaces.data(), b.surfaces.size()));
}

void check_chars(const Impl& m, std::size_t T, Span<const std::int32_t> char_ids,
                 Span<const std::int32_t> char_offsets) {
  if (!m.arch.has_char_encoder()) throw Error("character ids given, but this model has no character encoder");
  if (char_offsets.size() != T + 1 || char_offsets[0] != 0 ||
      static_cast<std::size_t>(char_offsets[T]) != char_ids.size())
    throw Error(
        "character offsets must be one more than the tokens, start at 0 and end at the number of "
        "character ids");
  for (std::size_t i = 0; i < T; ++i)
    if (char_offsets[i + 1] < char_offsets[i]) throw Error("character offsets must not decrease");
  for (const std::int32_t c : char_ids)
    if (c < 0 || static_cast<std::size_t>(c) >= m.characters.size())
      throw Error("character id " + std::to_string(c) + " is outside the character list");
}

void refuse_without_chars(const Impl& m, const char* what) {
  if (m.arch.has_char_encoder())
    throw Error(std::string(what) +
                ": this model has a character encoder; pass the character ids too (or give text or tokens)");
}

/// The n-gram part reads tokens (strings), which ids alone do not give back: a token outside the
/// vocabulary has id 1 whatever it was. Calls without the words are refused, never run without
/// the part.
void refuse_without_words(const Impl& m, const char* what) {
  if (!m.ngram.empty())
    throw Error(std::string(what) +
                ": this model has an n-gram part, which reads the tokens; give text or tokens, or the "
                "words with the ids");
}

void check_words(const Impl& m, std::size_t T, Span<const std::string> words) {
  if (m.ngram.empty()) throw Error("words given, but this model has no n-gram part");
  if (words.size() != T)
    throw Error(std::to_string(words.size()) + " words given for " + std::to_string(T) + " token ids");
}

}  // namespace

namespace {

/// Pooling of a classifier over the top layer's outputs top [T x F] into pooled [F] (zeros when
/// T = 0).
void pool(const Impl& m, const float* top, std::size_t T, float* pooled) {
  const std::size_t H = m.arch.hidden_size, F = m.arch.features();
  std::fill(pooled, pooled + F, 0.0f);
  if (T == 0) return;
  switch (m.arch.pooling) {
    case Pooling::kLast:
      std::memcpy(pooled, top + (T - 1) * F, H * sizeof(float));
      if (m.arch.bidirectional) std::memcpy(pooled + H, top + H, H * sizeof(float));
      break;
    case Pooling::kMean:
      for (std::size_t t = 0; t < T; ++t)
        for (std::size_t j = 0; j < F; ++j) pooled[j] += top[t * F + j];
      for (std::size_t j = 0; j < F; ++j) pooled[j] /= static_cast<float>(T);
      break;
    case Pooling::kMax:
      std::memcpy(pooled, top, F * sizeof(float));
      for (std::size_t t = 1; t < T; ++t)
        for (std::size_t j = 0; j < F; ++j) pooled[j] = std::max(pooled[j], top[t * F + j]);
      break;
  }
}

/// With an n-gram part: b.ngram = its scores of words[0 .. T).
void prepare_ngram(const Impl& m, Buffers& b, const std::string* words, std::size_t T) {
  if (m.ngram.empty()) return;
  ensure(b.ngram, m.labels.size());
  ngram_scores(m, b, words, T, b.ngram.data());
}

/// Classifies the T tokens in b.ids (and b.char_ids / b.char_off for a character encoder; with an
/// n-gram part, b.ngram holds its scores, prepare_ngram).
const ClassifyResult& classify_prepared(const Impl& m, Buffers& b, std::size_t T) {
  ensure(b.pooled, m.arch.features());
  pool(m, T > 0 ? run_stack(m, b, T) : nullptr, T, b.pooled.data());
  return finish_classify(m, b, T);
}

const TagResult& tag_prepared(const Impl& m, Buffers& b, std::size_t T) {
  const float* top = T > 0 ? run_stack(m, b, T) : nullptr;
  b.tres.tokens = {};
  b.tres.token_bytes = {};
  return finish_tag(m, b, top, T);
}

void check_task(const Impl& m, Task task) {
  if (m.arch.task != task)
    throw Error(task == Task::kClassify ? "classify: this model is a tagger; use tag()"
                                        : "tag: this model is a classifier; use classify()");
}

void copy_ids(Buffers& b, Span<const std::uint32_t> ids) {
  ensure(b.ids, ids.size());
  if (!ids.empty()) std::memcpy(b.ids.data(), ids.data(), ids.size() * sizeof(std::uint32_t));
}

void copy_chars(Buffers& b, Span<const std::int32_t> char_ids, Span<const std::int32_t> char_offsets) {
  b.char_ids.assign(char_ids.begin(), char_ids.end());
  b.char_off.assign(char_offsets.begin(), char_offsets.end());
}

}  // namespace

const ClassifyResult& Context::classify_ids(Span<const std::uint32_t> ids) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  refuse_without_chars(m, "classify_ids");
  refuse_without_words(m, "classify_ids");
  check_ids(m, ids);
  copy_ids(*b_, ids);
  return classify_prepared(m, *b_, ids.size());
}

const ClassifyResult& Context::classify_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                            Span<const std::int32_t> char_offsets) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  refuse_without_words(m, "classify_ids");
  check_ids(m, ids);
  check_chars(m, ids.size(), char_ids, char_offsets);
  copy_ids(*b_, ids);
  copy_chars(*b_, char_ids, char_offsets);
  return classify_prepared(m, *b_, ids.size());
}

const ClassifyResult& Context::classify_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                            Span<const std::int32_t> char_offsets,
                                            Span<const std::string> words) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  check_ids(m, ids);
  check_words(m, ids.size(), words);
  if (m.arch.has_char_encoder() || !char_ids.empty() || !char_offsets.empty())
    check_chars(m, ids.size(), char_ids, char_offsets);
  copy_ids(*b_, ids);
  if (m.arch.has_char_encoder()) copy_chars(*b_, char_ids, char_offsets);
  prepare_ngram(m, *b_, words.data(), ids.size());
  return classify_prepared(m, *b_, ids.size());
}

const ClassifyResult& Context::classify_tokens(Span<const std::string> tokens) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  if (m.arch.has_char_encoder())
    tokens_with_chars(m, *b_, tokens);
  else
    tokens_to_ids(m, *b_, tokens);
  prepare_ngram(m, *b_, m.arch.has_char_encoder() ? b_->words.data() : tokens.data(), tokens.size());
  return classify_prepared(m, *b_, tokens.size());
}

const ClassifyResult& Context::classify(std::string_view text) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  if (!m.arch.has_char_encoder()) {
    m.tokenizer->tokenize(text, b_->tokens);
    return classify_tokens(Span<const std::string>(b_->tokens.data(), b_->tokens.size()));
  }
  text_with_chars(m, *b_, text);
  prepare_ngram(m, *b_, b_->tokens.data(), b_->tokens.size());
  return classify_prepared(m, *b_, b_->tokens.size());
}

namespace {

void check_occlusion(const Impl& m, std::uint32_t target) {
  if (m.arch.task != Task::kClassify) throw Error("occlusion: this model is a tagger; only classifiers");
  if (target >= m.labels.size())
    throw Error("occlusion: label " + std::to_string(target) + " is outside the model's " +
                std::to_string(m.labels.size()) + " labels");
}

/// Occlusion scores of the T tokens in b.ids (and b.char_ids / b.char_off): token t is replaced
/// by the padding id and, with a character encoder, by no characters (zero features); with an
/// n-gram part (words: the T words it reads), every n-gram holding token t is left out.
Span<const float> occlude_prepared(const Impl& m, Buffers& b, std::size_t T, std::uint32_t target,
                                   const std::string* words) {
  if (!m.ngram.empty()) ensure(b.ngram, m.labels.size());
  const bool chars = m.arch.has_char_encoder();
  ensure(b.occlusion_ids, T);
  if (T) std::memcpy(b.occlusion_ids.data(), b.ids.data(), T * sizeof(std::uint32_t));
  if (chars) {
    b.occlusion_chars = b.char_ids;
    b.occlusion_char_off = b.char_off;
  }
  ensure(b.occlusion, T);
  for (std::size_t t = 0; t < T; ++t) {
    std::memcpy(b.ids.data(), b.occlusion_ids.data(), T * sizeof(std::uint32_t));
    b.ids[t] = 0;  // padding id: zero embedding
    if (chars) {
      const auto from = static_cast<std::size_t>(b.occlusion_char_off[t]);
      const auto to = static_cast<std::size_t>(b.occlusion_char_off[t + 1]);
      const auto removed = static_cast<std::int32_t>(to - from);
      b.char_ids.assign(b.occlusion_chars.begin(),
                        b.occlusion_chars.begin() + static_cast<std::ptrdiff_t>(from));
      b.char_ids.insert(b.char_ids.end(), b.occlusion_chars.begin() + static_cast<std::ptrdiff_t>(to),
                        b.occlusion_chars.end());
      for (std::size_t i = 0; i <= T; ++i) b.char_off[i] = b.occlusion_char_off[i] - (i > t ? removed : 0);
    }
    if (!m.ngram.empty()) ngram_scores(m, b, words, T, b.ngram.data(), t);
    b.occlusion[t] = classify_prepared(m, b, T).probabilities[target];
  }
  if (T) std::memcpy(b.ids.data(), b.occlusion_ids.data(), T * sizeof(std::uint32_t));
  if (chars) {
    b.char_ids = b.occlusion_chars;
    b.char_off = b.occlusion_char_off;
  }
  prepare_ngram(m, b, words, T);
  const float whole = classify_prepared(m, b, T).probabilities[target];
  for (std::size_t t = 0; t < T; ++t) b.occlusion[t] = whole - b.occlusion[t];
  return Span<const float>(b.occlusion.data(), T);
}

}  // namespace

Span<const float> Context::occlusion_ids(Span<const std::uint32_t> ids, std::uint32_t target) {
  const Impl& m = *model_.impl_;
  check_occlusion(m, target);
  refuse_without_chars(m, "occlusion_ids");
  refuse_without_words(m, "occlusion_ids");
  check_ids(m, ids);
  copy_ids(*b_, ids);
  return occlude_prepared(m, *b_, ids.size(), target, nullptr);
}

Span<const float> Context::occlusion_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                         Span<const std::int32_t> char_offsets, std::uint32_t target) {
  const Impl& m = *model_.impl_;
  check_occlusion(m, target);
  refuse_without_words(m, "occlusion_ids");
  check_ids(m, ids);
  check_chars(m, ids.size(), char_ids, char_offsets);
  copy_ids(*b_, ids);
  copy_chars(*b_, char_ids, char_offsets);
  return occlude_prepared(m, *b_, ids.size(), target, nullptr);
}

Span<const float> Context::occlusion_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                         Span<const std::int32_t> char_offsets, Span<const std::string> words,
                                         std::uint32_t target) {
  const Impl& m = *model_.impl_;
  check_occlusion(m, target);
  check_ids(m, ids);
  check_words(m, ids.size(), words);
  if (m.arch.has_char_encoder() || !char_ids.empty() || !char_offsets.empty())
    check_chars(m, ids.size(), char_ids, char_offsets);
  copy_ids(*b_, ids);
  if (m.arch.has_char_encoder()) copy_chars(*b_, char_ids, char_offsets);
  return occlude_prepared(m, *b_, ids.size(), target, words.data());
}

Span<const float> Context::occlusion(std::string_view text, std::uint32_t target) {
  const Impl& m = *model_.impl_;
  check_occlusion(m, target);
  if (m.arch.has_char_encoder()) {
    text_with_chars(m, *b_, text);
  } else {
    m.tokenizer->tokenize(text, b_->tokens);
    tokens_to_ids(m, *b_, Span<const std::string>(b_->tokens.data(), b_->tokens.size()));
  }
  return occlude_prepared(m, *b_, b_->tokens.size(), target, b_->tokens.data());
}

Span<const std::string> Context::tokens() const {
  return Span<const std::string>(b_->tokens.data(), b_->tokens.size());
}

const TagResult& Context::tag_ids(Span<const std::uint32_t> ids) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  refuse_without_chars(m, "tag_ids");
  check_ids(m, ids);
  copy_ids(*b_, ids);
  return tag_prepared(m, *b_, ids.size());
}

const TagResult& Context::tag_ids(Span<const std::uint32_t> ids, Span<const std::int32_t> char_ids,
                                  Span<const std::int32_t> char_offsets) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  check_ids(m, ids);
  check_chars(m, ids.size(), char_ids, char_offsets);
  copy_ids(*b_, ids);
  copy_chars(*b_, char_ids, char_offsets);
  return tag_prepared(m, *b_, ids.size());
}

const TagResult& Context::tag_tokens(Span<const std::string> tokens) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  if (m.arch.has_char_encoder())
    tokens_with_chars(m, *b_, tokens);
  else
    tokens_to_ids(m, *b_, tokens);
  tag_prepared(m, *b_, tokens.size());
  b_->tres.tokens = tokens;
  return b_->tres;
}

const TagResult& Context::tag(std::string_view text) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  Buffers& b = *b_;
  if (!m.arch.has_char_encoder()) {
    m.tokenizer->tokenize(text, b.tokens, b.token_bytes);
    tag_tokens(Span<const std::string>(b.tokens.data(), b.tokens.size()));
  } else {
    text_with_chars(m, b, text, &b.token_bytes);
    tag_prepared(m, b, b.tokens.size());
    b.tres.tokens = Span<const std::string>(b.tokens.data(), b.tokens.size());
  }
  // A span's bytes run from its first token's first byte to its last token's last byte.
  for (TagSpan& s : b.spans) {
    s.byte_begin = b.token_bytes[s.begin].begin;
    s.byte_end = b.token_bytes[s.end - 1].end;
  }
  b.tres.token_bytes = Span<const ByteRange>(b.token_bytes.data(), b.token_bytes.size());
  return b.tres;
}

// ---- batched calls ------------------------------------------------------------------------------

namespace {

[[noreturn]] void fail_for_text(std::size_t i, const Error& e) {
  throw Error("text " + std::to_string(i) + ": " + e.what());
}

/// Starts a batch of B texts (their inputs are appended by batch_add in input order).
void batch_begin(Buffers& b, std::size_t B) {
  ensure(b.boff, B);
  ensure(b.blen, B);
  b.btotal = 0;
}

/// Appends the input rows of text i: T tokens with these ids and, for a character encoder, their
/// characters (token t's at char_ids[char_off[t] .. char_off[t+1])).
void batch_add(const Impl& m, Buffers& b, std::size_t i, const std::uint32_t* ids, std::size_t T,
               const std::int32_t* char_ids, const std::int32_t* char_off) {
  const std::size_t E = m.arch.input_size();
  b.boff[i] = b.btotal;
  b.blen[i] = T;
  ensure(b.bx, (b.btotal + T) * E);
  for (std::size_t t = 0; t < T; ++t) {
    float* row = b.bx.data() + (b.btotal + t) * E;
    embed_row(m, ids[t], row);
    if (m.arch.has_char_encoder()) char_features(m, b, char_ids, char_off, t, row + m.arch.embedding_size);
  }
  b.btotal += T;
}

/// The RNN stack over every text of the batch; returns the top layer's outputs [btotal x F], text
/// i's tokens at rows boff[i] .. boff[i] + blen[i]. The texts run longest first, so those still
/// running at step s are the first `live` of that order: their states are rows 0 .. live of bh/bc
/// and one recurrent product per step covers them all; a text that has ended keeps its final
/// state (its row is no longer read or written). Each text sees exactly the arithmetic of
/// run_stack: the kernels sum every output in the same order for any number of rows.
const float* batch_stack(const Impl& m, Buffers& b, std::size_t B) {
  const auto& a = m.arch;
  const std::size_t N = b.btotal, H = a.hidden_size, GH = a.gates() * H, F = a.features();
  ensure(b.bproj, N * GH);
  ensure(b.bout_a, N * F);
  ensure(b.bout_b, N * F);
  ensure(b.bh, B * H);
  ensure(b.bc, B * H);
  ensure(b.bhp, B * GH);
  ensure(b.gates, GH);
  ensure(b.border, B);
  for (std::size_t i = 0; i < B; ++i) b.border[i] = i;
  std::sort(
      b.border.begin(), b.border.begin() + static_cast<std::ptrdiff_t>(B),
      [&b](std::size_t x, std::size_t y) { return b.blen[x] != b.blen[y] ? b.blen[x] > b.blen[y] : x < y; });
  const std::size_t steps = B > 0 ? b.blen[b.border[0]] : 0;
  const float* in = b.bx.data();
  float* out = b.bout_a.data();
  for (std::size_t k = 0; k < a.layers; ++k) {
    for (std::size_t d = 0; d < a.directions(); ++d) {
      const Direction& dir = m.layers[k][d];
      apply(m, dir.w_input, in, N, b.bproj.data(), GH, b);  // every token of the batch in one product
      for (std::size_t r = 0; r < N; ++r) {
        float* p = b.bproj.data() + r * GH;
        for (std::size_t j = 0; j < GH; ++j) p[j] += dir.bias[j];
      }
      std::fill(b.bh.begin(), b.bh.begin() + static_cast<std::ptrdiff_t>(B * H), 0.0f);
      std::fill(b.bc.begin(), b.bc.begin() + static_cast<std::ptrdiff_t>(B * H), 0.0f);
      std::size_t live = B;
      for (std::size_t s = 0; s < steps; ++s) {
        while (b.blen[b.border[live - 1]] <= s) --live;  // the longest text runs to the end: live >= 1
        apply(m, dir.w_hidden, b.bh.data(), live, b.bhp.data(), GH, b);
        for (std::size_t j = 0; j < live; ++j) {
          const std::size_t i = b.border[j];
          const std::size_t row = b.boff[i] + (d == 0 ? s : b.blen[i] - 1 - s);
          float* h = b.bh.data() + j * H;
          cell_update(m, dir, b.bproj.data() + row * GH, b.bhp.data() + j * GH, h, b.bc.data() + j * H,
                      b.gates.data());
          std::memcpy(out + row * F + d * H, h, H * sizeof(float));
        }
      }
    }
    in = out;
    out = out == b.bout_a.data() ? b.bout_b.data() : b.bout_a.data();
  }
  return in;
}

Span<const ClassifyResult> batch_classify(const Impl& m, Buffers& b, std::size_t B) {
  const std::size_t F = m.arch.features(), C = m.labels.size();
  const float* top = b.btotal > 0 ? batch_stack(m, b, B) : nullptr;
  ensure(b.bpooled, B * F);
  for (std::size_t i = 0; i < B; ++i)
    pool(m, b.blen[i] > 0 ? top + b.boff[i] * F : nullptr, b.blen[i], b.bpooled.data() + i * F);
  ensure(b.blogits, B * C);
  ensure(b.bprobs, B * C);
  ensure(b.bchosen, B * C);
  ensure(b.bcres, B);
  if (B > 0) apply(m, m.head, b.bpooled.data(), B, b.blogits.data(), C, b);
  for (std::size_t i = 0; i < B; ++i) {
    float* logits = b.blogits.data() + i * C;
    for (std::size_t c = 0; c < C; ++c) logits[c] += m.head_bias[c];
    if (!m.ngram.empty())  // batch_tokens / batch_texts computed them
      for (std::size_t c = 0; c < C; ++c) logits[c] += b.bngram[i * C + c];
    decide_classify(m, b.calibrated, logits, b.bprobs.data() + i * C, b.bchosen.data() + i * C,
                    b.bpooled.data() + i * F, b.blen[i], b.bcres[i]);
  }
  return Span<const ClassifyResult>(b.bcres.data(), B);
}

Span<const TagResult> batch_tag(const Impl& m, Buffers& b, std::size_t B) {
  const std::size_t N = b.btotal, C = m.labels.size();
  const float* top = N > 0 ? batch_stack(m, b, B) : nullptr;
  ensure(b.blogits, N * C);
  ensure(b.bprobs, N * C);
  ensure(b.btags, N);
  ensure(b.bspan_off, B + 1);
  ensure(b.btres, B);
  if (N > 0) apply(m, m.head, top, N, b.blogits.data(), C, b);
  for (std::size_t r = 0; r < N; ++r)
    for (std::size_t c = 0; c < C; ++c) b.blogits[r * C + c] += m.head_bias[c];
  if (b.bspans.capacity() < N) b.bspans.reserve(N);  // at most one span per token: no growth later
  b.bspans.clear();
  for (std::size_t i = 0; i < B; ++i) {
    const std::size_t off = b.boff[i], T = b.blen[i];
    decode_tags(m, b, b.blogits.data() + off * C, T, b.bprobs.data() + off * C, b.btags.data() + off);
    b.bspan_off[i] = b.bspans.size();
    if (m.arch.tag_scheme != TagScheme::kNone) {
      if (b.spans.capacity() < T) b.spans.reserve(T);
      detail::extract_spans(m.tag_prefix, m.tag_type, b.btags.data() + off, T, b.spans);
      b.bspans.insert(b.bspans.end(), b.spans.begin(), b.spans.end());
    }
    TagResult& r = b.btres[i];
    r.tokens = {};
    r.token_bytes = {};
    r.tags = Span<const std::uint32_t>(b.btags.data() + off, T);
    r.probabilities = Span<const float>(b.bprobs.data() + off * C, T * C);
  }
  b.bspan_off[B] = b.bspans.size();
  for (std::size_t i = 0; i < B; ++i)
    b.btres[i].spans =
        Span<const TagSpan>(b.bspans.data() + b.bspan_off[i], b.bspan_off[i + 1] - b.bspan_off[i]);
  return Span<const TagResult>(b.btres.data(), B);
}

void batch_ids(const Impl& m, Buffers& b, Span<const Span<const std::uint32_t>> texts) {
  for (std::size_t i = 0; i < texts.size(); ++i) {
    try {
      check_ids(m, texts[i]);
    } catch (const Error& e) {
      fail_for_text(i, e);
    }
  }
  batch_begin(b, texts.size());
  for (std::size_t i = 0; i < texts.size(); ++i)
    batch_add(m, b, i, texts[i].data(), texts[i].size(), nullptr, nullptr);
}

void batch_ids_chars(const Impl& m, Buffers& b, Span<const Span<const std::uint32_t>> texts,
                     Span<const Span<const std::int32_t>> char_ids,
                     Span<const Span<const std::int32_t>> char_offsets) {
  if (!m.arch.has_char_encoder()) throw Error("character ids given, but this model has no character encoder");
  if (char_ids.size() != texts.size() || char_offsets.size() != texts.size())
    throw Error("a batch of " + std::to_string(texts.size()) +
                " texts needs as many character id lists and offset lists (got " +
                std::to_string(char_ids.size()) + " and " + std::to_string(char_offsets.size()) + ")");
  for (std::size_t i = 0; i < texts.size(); ++i) {
    try {
      check_ids(m, texts[i]);
      check_chars(m, texts[i].size(), char_ids[i], char_offsets[i]);
    } catch (const Error& e) {
      fail_for_text(i, e);
    }
  }
  batch_begin(b, texts.size());
  for (std::size_t i = 0; i < texts.size(); ++i)
    batch_add(m, b, i, texts[i].data(), texts[i].size(), char_ids[i].data(), char_offsets[i].data());
}

/// With an n-gram part, text i's scores into row i of b.bngram.
void batch_ngram(const Impl& m, Buffers& b, std::size_t i, const std::string* words, std::size_t T) {
  if (m.ngram.empty()) return;
  const std::size_t C = m.labels.size();
  ensure(b.bngram, (i + 1) * C);
  ngram_scores(m, b, words, T, b.bngram.data() + i * C);
}

void batch_tokens(const Impl& m, Buffers& b, Span<const Span<const std::string>> texts) {
  batch_begin(b, texts.size());
  for (std::size_t i = 0; i < texts.size(); ++i) {
    const std::size_t T = texts[i].size();
    if (m.arch.has_char_encoder()) {
      try {
        tokens_with_chars(m, b, texts[i]);
      } catch (const Error& e) {
        fail_for_text(i, e);
      }
      batch_add(m, b, i, b.ids.data(), T, b.char_ids.data(), b.char_off.data());
      batch_ngram(m, b, i, b.words.data(), T);
    } else {
      tokens_to_ids(m, b, texts[i]);
      batch_add(m, b, i, b.ids.data(), T, nullptr, nullptr);
      batch_ngram(m, b, i, texts[i].data(), T);
    }
  }
}

/// Tokenizes each text as classify()/tag() do; with keep_tokens the tokens and their bytes are
/// kept in b.btokens / b.bbytes at the texts' rows (boff).
void batch_texts(const Impl& m, Buffers& b, Span<const std::string_view> texts, bool keep_tokens) {
  batch_begin(b, texts.size());
  const bool chars = m.arch.has_char_encoder();
  for (std::size_t i = 0; i < texts.size(); ++i) {
    try {
      if (chars)
        text_with_chars(m, b, texts[i], keep_tokens ? &b.token_bytes : nullptr);
      else if (keep_tokens)
        m.tokenizer->tokenize(texts[i], b.tokens, b.token_bytes);
      else
        m.tokenizer->tokenize(texts[i], b.tokens);
    } catch (const Error& e) {
      fail_for_text(i, e);
    }
    const std::size_t T = b.tokens.size();
    if (!chars) tokens_to_ids(m, b, Span<const std::string>(b.tokens.data(), T));
    const std::size_t off = b.btotal;
    batch_add(m, b, i, b.ids.data(), T, chars ? b.char_ids.data() : nullptr,
              chars ? b.char_off.data() : nullptr);
    batch_ngram(m, b, i, b.tokens.data(), T);
    if (keep_tokens) {
      ensure(b.btokens, off + T);
      ensure(b.bbytes, off + T);
      for (std::size_t t = 0; t < T; ++t) {
        b.btokens[off + t] = b.tokens[t];  // reuses the slot's capacity
        b.bbytes[off + t] = b.token_bytes[t];
      }
    }
  }
}

}  // namespace

Span<const ClassifyResult> Context::classify_batch_ids(Span<const Span<const std::uint32_t>> texts) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  refuse_without_chars(m, "classify_batch_ids");
  refuse_without_words(m, "classify_batch_ids");
  batch_ids(m, *b_, texts);
  return batch_classify(m, *b_, texts.size());
}

Span<const ClassifyResult> Context::classify_batch_ids(Span<const Span<const std::uint32_t>> texts,
                                                       Span<const Span<const std::int32_t>> char_ids,
                                                       Span<const Span<const std::int32_t>> char_offsets) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  refuse_without_words(m, "classify_batch_ids");
  batch_ids_chars(m, *b_, texts, char_ids, char_offsets);
  return batch_classify(m, *b_, texts.size());
}

Span<const ClassifyResult> Context::classify_batch_tokens(Span<const Span<const std::string>> texts) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  batch_tokens(m, *b_, texts);
  return batch_classify(m, *b_, texts.size());
}

Span<const ClassifyResult> Context::classify_batch(Span<const std::string_view> texts) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kClassify);
  batch_texts(m, *b_, texts, /*keep_tokens=*/false);
  return batch_classify(m, *b_, texts.size());
}

Span<const TagResult> Context::tag_batch_ids(Span<const Span<const std::uint32_t>> texts) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  refuse_without_chars(m, "tag_batch_ids");
  batch_ids(m, *b_, texts);
  return batch_tag(m, *b_, texts.size());
}

Span<const TagResult> Context::tag_batch_ids(Span<const Span<const std::uint32_t>> texts,
                                             Span<const Span<const std::int32_t>> char_ids,
                                             Span<const Span<const std::int32_t>> char_offsets) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  batch_ids_chars(m, *b_, texts, char_ids, char_offsets);
  return batch_tag(m, *b_, texts.size());
}

Span<const TagResult> Context::tag_batch_tokens(Span<const Span<const std::string>> texts) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  Buffers& b = *b_;
  batch_tokens(m, b, texts);
  batch_tag(m, b, texts.size());
  for (std::size_t i = 0; i < texts.size(); ++i) b.btres[i].tokens = texts[i];
  return Span<const TagResult>(b.btres.data(), texts.size());
}

Span<const TagResult> Context::tag_batch(Span<const std::string_view> texts) {
  const Impl& m = *model_.impl_;
  check_task(m, Task::kTag);
  Buffers& b = *b_;
  batch_texts(m, b, texts, /*keep_tokens=*/true);
  batch_tag(m, b, texts.size());
  for (std::size_t i = 0; i < texts.size(); ++i) {
    TagResult& r = b.btres[i];
    const std::size_t off = b.boff[i], T = b.blen[i];
    r.tokens = Span<const std::string>(b.btokens.data() + off, T);
    r.token_bytes = Span<const ByteRange>(b.bbytes.data() + off, T);
  }
  // A span's bytes run from its first token's first byte to its last token's last byte.
  for (std::size_t i = 0; i < texts.size(); ++i)
    for (std::size_t k = b.bspan_off[i]; k < b.bspan_off[i + 1]; ++k) {
      TagSpan& s = b.bspans[k];
      s.byte_begin = b.bbytes[b.boff[i] + s.begin].begin;
      s.byte_end = b.bbytes[b.boff[i] + s.end - 1].end;
    }
  return Span<const TagResult>(b.btres.data(), texts.size());
}

// ---- step-wise ----------------------------------------------------------------------------------

void Context::reset() {
  const Impl& m = *model_.impl_;
  if (m.arch.bidirectional)
    throw Error(
        "step-wise inference needs a unidirectional model; this one is bidirectional (use classify/tag)");
  Buffers& b = *b_;
  const std::size_t L = m.arch.layers, H = m.arch.hidden_size, GH = m.arch.gates() * H;
  const std::size_t C = m.labels.size();
  ensure(b.sh, L * H);
  ensure(b.sc, L * H);
  ensure(b.sx, std::max(m.arch.input_size(), H));
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

Span<const float> Context::push(std::string_view token) {
  // The same check as classify()/tag() make on text: a token an application pushes must be UTF-8.
  const std::size_t bad = first_invalid_utf8(token);
  if (bad != std::string_view::npos)
    throw Error("invalid UTF-8 at byte " + std::to_string(bad + 1) + " of the token");
  const Impl& m = *model_.impl_;
  Buffers& b = *b_;
  if (!m.arch.has_char_encoder()) {
    if (m.ngram.empty()) return push_id(m.lookup(token));
    if (b.sh.empty()) reset();  // first use
    ensure(b.swords, b.steps + 1);
    b.swords[b.steps].assign(token);  // the word the n-gram part reads; reuses the slot's capacity
    embed_row(m, m.lookup(token), b.sx.data());
    return push_input();
  }
  if (b.sh.empty()) reset();  // first use
  const std::string one(token);
  tokens_with_chars(m, b, Span<const std::string>(&one, 1));
  if (!m.ngram.empty()) {
    ensure(b.swords, b.steps + 1);
    b.swords[b.steps].assign(b.words[0]);
  }
  input_row(m, b, 0, b.sx.data());
  return push_input();
}

Span<const float> Context::push_id(std::uint32_t id) {
  const Impl& m = *model_.impl_;
  Buffers& b = *b_;
  refuse_without_chars(m, "push_id");
  refuse_without_words(m, "push_id");
  if (b.sh.empty()) reset();  // first use
  if (id >= m.vocab_size()) throw Error("token id " + std::to_string(id) + " is outside the vocabulary");
  embed_row(m, id, b.sx.data());
  return push_input();
}

Span<const float> Context::push_input() {
  const Impl& m = *model_.impl_;
  Buffers& b = *b_;
  const std::size_t H = m.arch.hidden_size, GH = m.arch.gates() * H;
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
      case Pooling::kLast:
        std::memcpy(b.spool.data(), top, H * sizeof(float));
        break;
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
  const bool tempered = b.calibrated && !m.arch.temperature.empty();
  if (m.arch.output != Output::kCrf) {
    if (tempered)
      tempered_softmax(b.logits.data(), C, m.arch.temperature[0], b.sdist.data());
    else
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
  if (m.arch.output == Output::kCrf && tempered)
    temper_distribution(b.sdist.data(), C, m.arch.temperature[0]);
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
    b.pooled[j] = m.arch.pooling == Pooling::kMean && b.steps > 0 ? b.spool[j] / static_cast<float>(b.steps)
                                                                  : b.spool[j];
  prepare_ngram(m, b, b.swords.data(), b.steps);
  const ClassifyResult& r = finish_classify(m, b, b.steps);
  return r.probabilities;
}

void Context::set_calibrated(bool on) {
  b_->calibrated = on;
}

bool Context::calibrated() const {
  return b_->calibrated;
}

std::size_t Context::steps() const {
  return b_->steps;
}

}  // namespace gyre::runtime
