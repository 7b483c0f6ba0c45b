#pragma once
// Test support: small random models written with ModelFileWriter, and a straightforward
// double-precision forward pass written from the equations (LSTM: Hochreiter & Schmidhuber
// 1997 with the forget gate of Gers et al. 2000; GRU with the reset gate applied after the
// recurrent product, DEVELOPERS.md) to check the runtime against.

#include <cmath>
#include <cstdint>
#include <map>
#include <random>
#include <string>
#include <vector>

#include "gyre/runtime/model_file.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "gyre/runtime/ngram_part_file.hpp"
#include "runtime/detail/json.hpp"

namespace gyre::test {

struct RefModel {
  std::string task = "classify", cell = "lstm", pooling = "last", output = "softmax", scheme = "bio";
  std::size_t E = 5, H = 4, L = 1, V = 12;
  bool bidir = false;
  std::string tokenizer_mode = "whitespace";
  bool normalize = false;  // nfkc + case_fold (need ICU)
  double threshold = 0.5;
  std::vector<double> label_thresholds;  // sigmoid: "architecture.label_thresholds" when not empty
  std::vector<std::string> labels = {"alpha", "beta", "gamma"};
  std::vector<std::string> words;   // vocabulary from id 2 on (V = words.size() + 2); empty: w2 .. w{V-1}
  std::vector<double> temperature;  // architecture.temperature when not empty
  // Character encoder when char_F > 0 (needs an ICU runtime): char_E-wide character vectors,
  // char_F filters of width char_w over the character list `characters` ("<pad>", "<unk>" first).
  // The double-precision reference below does not compute it.
  std::size_t char_E = 0, char_F = 0, char_w = 3;
  std::vector<std::string> characters;
  // N-gram part (classify, softmax) when not empty: written with runtime::add_ngram_part, its
  // weights in the file's precision. classify_words() below adds it in double precision.
  runtime::NgramPart ngram;
  std::map<std::string, std::vector<double>> w;  // row-major
  std::map<std::string, std::pair<std::size_t, std::size_t>> shape;

  std::size_t G() const { return cell == "lstm" ? 4 : 3; }
  std::size_t dirs() const { return bidir ? 2 : 1; }
  std::size_t F() const { return H * dirs(); }
  std::size_t C() const { return labels.size(); }
  std::size_t input() const { return E + char_F; }

  void add(const std::string& name, std::size_t r, std::size_t c, std::mt19937& rng, double scale) {
    std::uniform_real_distribution<double> u(-scale, scale);
    std::vector<double> v(r * c);
    for (auto& x : v) x = static_cast<double>(static_cast<float>(u(rng)));  // exactly representable in f32
    w[name] = v;
    shape[name] = {r, c};
  }

  void randomize(std::uint32_t seed) {
    std::mt19937 rng(seed);
    w.clear();
    add("tokens.vectors", V, E, rng, 1.0);
    for (std::size_t k = 0; k < L; ++k)
      for (std::size_t d = 0; d < dirs(); ++d) {
        const std::string p = "rnn.l" + std::to_string(k) + (d == 0 ? ".fwd." : ".bwd.");
        add(p + "w_input", G() * H, k == 0 ? input() : F(), rng, 0.8);
        add(p + "w_hidden", G() * H, H, rng, 0.8);
        add(p + "b_input", 1, G() * H, rng, 0.5);
        if (cell == "gru") add(p + "b_hidden", 1, 3 * H, rng, 0.5);
      }
    if (char_F > 0) {
      add("chars.vectors", characters.size(), char_E, rng, 1.0);
      add("chars.w_filter", char_F, char_w * char_E, rng, 0.8);
      add("chars.b_filter", 1, char_F, rng, 0.5);
    }
    add("readout.w", C(), F(), rng, 1.5);
    add("readout.b", 1, C(), rng, 0.5);
    if (output == "crf") {
      add("crf.transitions", C(), C(), rng, 1.0);
      add("crf.start", 1, C(), rng, 1.0);
      add("crf.end", 1, C(), rng, 1.0);
    }
  }

  std::string header() const {
    using runtime::detail::Json;
    Json arch = Json::object();
    arch.set("task", Json::string(task));
    arch.set("cell", Json::string(cell));
    arch.set("embedding_size", Json::number(static_cast<double>(E)));
    arch.set("hidden_size", Json::number(static_cast<double>(H)));
    arch.set("layers", Json::number(static_cast<double>(L)));
    arch.set("bidirectional", Json::boolean(bidir));
    if (task == "classify") {
      arch.set("pooling", Json::string(pooling));
      if (output == "sigmoid") arch.set("multi_label_threshold", Json::number(threshold));
      if (output == "sigmoid" && !label_thresholds.empty()) {
        Json t = Json::array();
        for (const double v : label_thresholds) t.push_back(Json::number(v));
        arch.set("label_thresholds", std::move(t));
      }
    } else {
      arch.set("tag_scheme", Json::string(scheme));
    }
    arch.set("output", Json::string(output));
    if (!temperature.empty()) {
      Json t = Json::array();
      for (double v : temperature) t.push_back(Json::number(v));
      arch.set("temperature", std::move(t));
    }
    if (char_F > 0) {
      arch.set("char_embedding_size", Json::number(static_cast<double>(char_E)));
      arch.set("char_filters", Json::number(static_cast<double>(char_F)));
      arch.set("char_width", Json::number(static_cast<double>(char_w)));
    }
    if (!ngram.empty()) {
      Json g = Json::object();
      g.set("order", Json::number(ngram.order()));
      g.set("mix", Json::number(static_cast<double>(ngram.mix())));
      g.set("keys", Json::number(static_cast<double>(ngram.features())));
      arch.set("ngram", std::move(g));
    }
    Json h = Json::object();
    h.set("format", Json::string("gyre-model"));
    h.set("architecture", std::move(arch));
    Json labs = Json::array();
    for (const auto& l : labels) labs.push_back(Json::string(l));
    h.set("labels", std::move(labs));
    Json tok = Json::object();
    tok.set("mode", Json::string(tokenizer_mode));
    tok.set("nfkc", Json::boolean(normalize));
    tok.set("case_fold", Json::boolean(normalize));
    tok.set("fold_digits", Json::boolean(false));
    tok.set("keep_punctuation", Json::boolean(true));
    tok.set("max_tokens", Json::number(0));
    h.set("tokenizer", std::move(tok));
    Json voc = Json::array();
    voc.push_back(Json::string("<pad>"));
    voc.push_back(Json::string("<unk>"));
    for (std::size_t i = 2; i < V; ++i)
      voc.push_back(Json::string(words.empty() ? "w" + std::to_string(i) : words.at(i - 2)));
    h.set("vocabulary", std::move(voc));
    if (char_F > 0) {
      Json ch = Json::array();
      for (const auto& c : characters) ch.push_back(Json::string(c));
      h.set("characters", std::move(ch));
    }
    return h.dump();
  }

  /// Matrices in `dtype`, vectors (biases, CRF) always f32, as gyre export does.
  std::vector<unsigned char> file(runtime::DType dtype = runtime::DType::kF32) const {
    runtime::ModelFileWriter wr(header());
    for (const auto& [name, v] : w) {
      std::vector<float> f(v.begin(), v.end());
      const auto [r, c] = shape.at(name);
      const bool matrix = r > 1 && name.rfind("crf.", 0) != 0;
      wr.add_tensor(name, r, c, f, matrix ? dtype : runtime::DType::kF32);
    }
    runtime::add_ngram_part(wr, ngram, dtype);
    return wr.to_bytes();
  }

  // ---- double-precision reference --------------------------------------------------------------
  static double sig(double x) { return 1.0 / (1.0 + std::exp(-x)); }
  double at(const std::string& n, std::size_t r, std::size_t c) const {
    return w.at(n)[r * shape.at(n).second + c];
  }

  /// Top-layer outputs [T][F].
  std::vector<std::vector<double>> stack(const std::vector<std::uint32_t>& ids) const {
    const std::size_t T = ids.size();
    std::vector<std::vector<double>> in(T);
    for (std::size_t t = 0; t < T; ++t)
      for (std::size_t j = 0; j < E; ++j) in[t].push_back(at("tokens.vectors", ids[t], j));
    for (std::size_t k = 0; k < L; ++k) {
      std::vector<std::vector<double>> out(T, std::vector<double>(F(), 0.0));
      for (std::size_t d = 0; d < dirs(); ++d) {
        const std::string p = "rnn.l" + std::to_string(k) + (d == 0 ? ".fwd." : ".bwd.");
        std::vector<double> h(H, 0.0), c(H, 0.0);
        for (std::size_t s = 0; s < T; ++s) {
          const std::size_t t = d == 0 ? s : T - 1 - s;
          std::vector<double> wx(G() * H), uh(G() * H);
          for (std::size_t r = 0; r < G() * H; ++r) {
            double a = at(p + "b_input", 0, r), b = 0.0;
            for (std::size_t j = 0; j < in[t].size(); ++j) a += at(p + "w_input", r, j) * in[t][j];
            for (std::size_t j = 0; j < H; ++j) b += at(p + "w_hidden", r, j) * h[j];
            if (cell == "gru") b += at(p + "b_hidden", 0, r);
            wx[r] = a;
            uh[r] = b;
          }
          for (std::size_t j = 0; j < H; ++j) {
            if (cell == "lstm") {
              const double i = sig(wx[j] + uh[j]), f = sig(wx[H + j] + uh[H + j]);
              const double g = std::tanh(wx[2 * H + j] + uh[2 * H + j]),
                           o = sig(wx[3 * H + j] + uh[3 * H + j]);
              c[j] = f * c[j] + i * g;
              h[j] = o * std::tanh(c[j]);
            } else {
              const double r = sig(wx[j] + uh[j]), z = sig(wx[H + j] + uh[H + j]);
              const double n = std::tanh(wx[2 * H + j] + r * uh[2 * H + j]);
              h[j] = (1 - z) * n + z * h[j];
            }
          }
          for (std::size_t j = 0; j < H; ++j) out[t][d * H + j] = h[j];
        }
      }
      in = out;
    }
    return in;
  }

  std::vector<double> head(const std::vector<double>& x) const {
    std::vector<double> y(C());
    for (std::size_t i = 0; i < C(); ++i) {
      y[i] = at("readout.b", 0, i);
      for (std::size_t j = 0; j < F(); ++j) y[i] += at("readout.w", i, j) * x[j];
    }
    return y;
  }

  static std::vector<double> softmax(std::vector<double> x) {
    double mx = x[0], s = 0;
    for (double v : x) mx = std::max(mx, v);
    for (double& v : x) s += (v = std::exp(v - mx));
    for (double& v : x) v /= s;
    return x;
  }

  std::vector<double> classify(const std::vector<std::uint32_t>& ids) const {
    auto out = logits(ids);
    if (output == "sigmoid") {
      for (double& v : out) v = sig(v);
      return out;
    }
    return softmax(out);
  }

  /// mix * (W x + b) of the n-gram part for the tokens `text`, in double, written from the definition in
  /// gyre/runtime/ngram_part.hpp without its code: items = [begin, tokens..., end]; keys = every token,
  /// and every run of n = 2..order consecutive items joined by U+0001; a key's value 1 + ln(count)
  /// when it is in the key list, then unit L2 norm. Keys holding token `skip` are left out.
  std::vector<double> ngram_scores(const std::vector<std::string>& text,
                                   std::size_t skip = static_cast<std::size_t>(-1)) const {
    std::vector<double> out(C(), 0.0);
    if (ngram.empty()) return out;
    std::map<std::size_t, double> count;  // key index -> count
    auto add = [&](const std::string& key) {
      const auto& keys = ngram.keys();
      for (std::size_t k = 0; k < keys.size(); ++k)
        if (keys[k] == key) count[k] += 1.0;
    };
    const std::size_t n = text.size();
    for (std::size_t i = 0; i < n; ++i)
      if (i != skip) add(text[i]);
    if (n > 0) {
      std::vector<std::string> items = {std::string("\x02")};
      items.insert(items.end(), text.begin(), text.end());
      items.emplace_back("\x03");
      for (std::size_t len = 2; len <= static_cast<std::size_t>(ngram.order()); ++len)
        for (std::size_t s = 0; s + len <= items.size(); ++s) {
          if (skip < n && s <= skip + 1 && skip + 1 < s + len) continue;  // item skip+1 = word skip
          std::string key = items[s];
          for (std::size_t k = 1; k < len; ++k) key += std::string("\x01") + items[s + k];
          add(key);
        }
    }
    double norm2 = 0.0;
    for (auto& [k, c] : count) {
      c = 1.0 + std::log(c);
      norm2 += c * c;
    }
    for (std::size_t c = 0; c < C(); ++c) {
      double z = ngram.bias()[c];
      for (const auto& [k, v] : count) z += v / std::sqrt(norm2) * ngram.weights()[k * C() + c];
      out[c] = static_cast<double>(ngram.mix()) * z;
    }
    return out;
  }

  /// Network logits (pooled head output) of ids.
  std::vector<double> logits(const std::vector<std::uint32_t>& ids) const {
    const auto top = stack(ids);
    const std::size_t T = ids.size();
    std::vector<double> pooled(F(), 0.0);
    if (T > 0) {
      if (pooling == "last") {
        for (std::size_t j = 0; j < H; ++j) pooled[j] = top[T - 1][j];
        if (bidir)
          for (std::size_t j = 0; j < H; ++j) pooled[H + j] = top[0][H + j];
      } else if (pooling == "mean") {
        for (const auto& row : top)
          for (std::size_t j = 0; j < F(); ++j) pooled[j] += row[j] / static_cast<double>(T);
      } else {
        pooled = top[0];
        for (const auto& row : top)
          for (std::size_t j = 0; j < F(); ++j) pooled[j] = std::max(pooled[j], row[j]);
      }
    }
    return head(pooled);
  }

  /// Softmax classifier with the n-gram part: softmax((network logits + part scores) / T), T the
  /// header temperature when `calibrated` (Guo et al. 2017).
  std::vector<double> classify_words(const std::vector<std::uint32_t>& ids,
                                     const std::vector<std::string>& text, bool calibrated = true,
                                     std::size_t skip = static_cast<std::size_t>(-1)) const {
    auto z = logits(ids);
    const auto s = ngram_scores(text, skip);
    const double t = calibrated && !temperature.empty() ? temperature[0] : 1.0;
    for (std::size_t c = 0; c < C(); ++c) z[c] = (z[c] + s[c]) / t;
    return softmax(z);
  }

  std::vector<std::vector<double>> emissions(const std::vector<std::uint32_t>& ids) const {
    std::vector<std::vector<double>> e;
    for (const auto& row : stack(ids)) e.push_back(head(row));
    return e;
  }
};

}  // namespace gyre::test
