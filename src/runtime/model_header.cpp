// The model description in a model file's header: parsing, bounds, writing, and the tensors it
// implies (docs/model-format.md "Model header schema" and "Tensors").

#include "gyre/runtime/model_header.hpp"

#include <algorithm>
#include <charconv>
#include <cmath>
#include <cstdlib>
#include <initializer_list>
#include <utility>

#include "gyre/runtime/calibration.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/runtime/ngram_part.hpp"
#include "runtime/detail/json.hpp"

namespace gyre::runtime {

using detail::Json;

namespace {

/// Name <-> value tables of the enums; the names are the on-disk spellings.
template <class E>
class Names {
 public:
  template <std::size_t N>
  constexpr explicit Names(const std::pair<const char*, E> (&list)[N]) : list_(list), size_(N) {}

  const char* name(E v) const {
    for (std::size_t i = 0; i < size_; ++i)
      if (list_[i].second == v) return list_[i].first;
    return "?";
  }
  std::string all() const {
    std::string s;
    for (std::size_t i = 0; i < size_; ++i) s += (i ? ", " : "") + std::string(list_[i].first);
    return s;
  }
  E parse(std::string_view name) const {
    for (std::size_t i = 0; i < size_; ++i)
      if (name == list_[i].first) return list_[i].second;
    throw Error("'" + std::string(name) + "' is not one of: " + all());
  }

 private:
  const std::pair<const char*, E>* list_;
  std::size_t size_;
};

constexpr std::pair<const char*, Task> kTaskList[] = {{"classify", Task::kClassify}, {"tag", Task::kTag}};
constexpr std::pair<const char*, Cell> kCellList[] = {{"lstm", Cell::kLstm}, {"gru", Cell::kGru}};
constexpr std::pair<const char*, Pooling> kPoolingList[] = {
    {"last", Pooling::kLast}, {"mean", Pooling::kMean}, {"max", Pooling::kMax}};
constexpr std::pair<const char*, Output> kOutputList[] = {
    {"softmax", Output::kSoftmax}, {"sigmoid", Output::kSigmoid}, {"crf", Output::kCrf}};
constexpr std::pair<const char*, TagScheme> kSchemeList[] = {
    {"none", TagScheme::kNone}, {"bio", TagScheme::kBio}, {"bioes", TagScheme::kBioes}};
constexpr Names<Task> kTasks(kTaskList);
constexpr Names<Cell> kCells(kCellList);
constexpr Names<Pooling> kPoolings(kPoolingList);
constexpr Names<Output> kOutputs(kOutputList);
constexpr Names<TagScheme> kSchemes(kSchemeList);

}  // namespace

const char* to_string(Task v) {
  return kTasks.name(v);
}
const char* to_string(Cell v) {
  return kCells.name(v);
}
const char* to_string(Pooling v) {
  return kPoolings.name(v);
}
const char* to_string(Output v) {
  return kOutputs.name(v);
}
const char* to_string(TagScheme v) {
  return kSchemes.name(v);
}
Task task_from_string(std::string_view name) {
  return kTasks.parse(name);
}
Cell cell_from_string(std::string_view name) {
  return kCells.parse(name);
}
Pooling pooling_from_string(std::string_view name) {
  return kPoolings.parse(name);
}
Output output_from_string(std::string_view name) {
  return kOutputs.parse(name);
}
TagScheme tag_scheme_from_string(std::string_view name) {
  return kSchemes.parse(name);
}

// ---- reading ------------------------------------------------------------------------------------

namespace {

/// s as a JSON string literal, cut to 60 bytes: control characters are shown escaped.
std::string quoted(std::string_view s) {
  std::string out;
  detail::json_escape(s.substr(0, 60), out);
  return out;
}

/// Typed access to the members of one header object; every failure names the key path.
class Fields {
 public:
  Fields(const std::string& file, const Json& obj, std::string where)
      : file_(file), obj_(obj), where_(std::move(where)) {}

  [[noreturn]] void fail(const std::string& msg) const { throw Error(file_ + ": header: " + msg); }
  const std::string& file() const { return file_; }
  std::string path(const char* key) const { return "\"" + where_ + key + "\""; }

  bool has(const char* key) const { return obj_.find(key) != nullptr; }
  const Json& get(const char* key) const {
    const Json* v = obj_.find(key);
    if (!v) fail("missing " + path(key));
    return *v;
  }
  std::string str(const char* key) const {
    const Json& v = get(key);
    if (!v.is_string()) fail(path(key) + " must be a string");
    return v.as_string();
  }
  bool boolean(const char* key) const {
    const Json& v = get(key);
    if (!v.is_bool()) fail(path(key) + " must be true or false");
    return v.as_bool();
  }
  std::size_t integer(const char* key, std::size_t lo, std::size_t hi) const {
    const Json& v = get(key);
    const double d = v.is_number() ? v.as_number() : -1.0;
    if (!v.is_number() || d != std::floor(d) || d < static_cast<double>(lo) || d > static_cast<double>(hi))
      fail(path(key) + " must be an integer in [" + std::to_string(lo) + ", " + std::to_string(hi) +
           "], not " + v.dump());
    return static_cast<std::size_t>(d);
  }
  template <class E>
  E choice(const char* key, const Names<E>& names, std::initializer_list<E> allowed) const {
    const std::string s = str(key);
    E value{};
    try {
      value = names.parse(s);
    } catch (const Error& e) {
      fail(path(key) + ": " + e.what());
    }
    if (std::find(allowed.begin(), allowed.end(), value) == allowed.end()) {
      std::string list;
      for (E a : allowed) list += (list.empty() ? "" : ", ") + std::string(names.name(a));
      fail(path(key) + " is " + quoted(s) + "; here it must be one of: " + list);
    }
    return value;
  }
  /// Refuses members outside `allowed`.
  void only(std::initializer_list<const char*> allowed) const {
    for (const auto& k : obj_.keys()) {
      bool ok = false;
      for (const char* a : allowed) ok = ok || k == a;
      if (!ok) fail("unknown key " + quoted(where_ + k) + " (written by a newer gyre?)");
    }
  }

 private:
  const std::string& file_;
  const Json& obj_;
  std::string where_;
};

Architecture read_architecture(const Fields& a) {
  using L = ModelHeaderLimits;
  Architecture arch;
  arch.task = a.choice("task", kTasks, {Task::kClassify, Task::kTag});
  if (arch.task == Task::kClassify) {
    a.only({"task", "cell", "embedding_size", "hidden_size", "layers", "bidirectional", "pooling", "output",
            "multi_label_threshold", "label_thresholds", "temperature", "char_embedding_size", "char_filters",
            "char_width", "ngram"});
  } else {
    a.only({"task", "cell", "embedding_size", "hidden_size", "layers", "bidirectional", "output",
            "tag_scheme", "temperature", "char_embedding_size", "char_filters", "char_width"});
  }
  arch.cell = a.choice("cell", kCells, {Cell::kLstm, Cell::kGru});
  arch.embedding_size = a.integer("embedding_size", 1, L::kMaxEmbeddingSize);
  arch.hidden_size = a.integer("hidden_size", 1, L::kMaxHiddenSize);
  arch.layers = a.integer("layers", 1, L::kMaxLayers);
  arch.bidirectional = a.boolean("bidirectional");
  if (arch.task == Task::kClassify) {
    arch.pooling = a.choice("pooling", kPoolings, {Pooling::kLast, Pooling::kMean, Pooling::kMax});
    arch.output = a.choice("output", kOutputs, {Output::kSoftmax, Output::kSigmoid});
    if (arch.output == Output::kSigmoid) {
      const Json& t = a.get("multi_label_threshold");
      if (!t.is_number() || !(t.as_number() > 0.0 && t.as_number() < 1.0))
        a.fail(a.path("multi_label_threshold") + " must be a number in (0, 1)");
      arch.multi_label_threshold = static_cast<float>(t.as_number());
      if (a.has("label_thresholds")) {
        // Its length (one per label) is checked once the labels are read (parse_model_header).
        const Json& l = a.get("label_thresholds");
        if (!l.is_array() || l.size() == 0 || l.size() > ModelHeaderLimits::kMaxLabels)
          a.fail(a.path("label_thresholds") + " must be a non-empty array of numbers");
        for (const Json& v : l.items()) {
          if (!v.is_number() || !(v.as_number() > 0.0 && v.as_number() < 1.0))
            a.fail(a.path("label_thresholds") + " holds " + v.dump() +
                   "; every threshold must be a number in (0, 1)");
          arch.label_thresholds.push_back(static_cast<float>(v.as_number()));
        }
      }
    } else if (a.has("multi_label_threshold")) {
      a.fail(a.path("multi_label_threshold") + " is only for output \"sigmoid\"");
    } else if (a.has("label_thresholds")) {
      a.fail(a.path("label_thresholds") + " is only for output \"sigmoid\"");
    }
  } else {
    arch.output = a.choice("output", kOutputs, {Output::kSoftmax, Output::kCrf});
    arch.tag_scheme =
        a.choice("tag_scheme", kSchemes, {TagScheme::kNone, TagScheme::kBio, TagScheme::kBioes});
  }
  if (a.has("temperature")) {
    const Json& t = a.get("temperature");
    if (!t.is_array() || t.size() == 0 || t.size() > ModelHeaderLimits::kMaxLabels)
      a.fail(a.path("temperature") + " must be a non-empty array of numbers");
    for (const Json& v : t.items()) {
      if (!v.is_number() || !(v.as_number() >= static_cast<double>(kMinTemperature) &&
                              v.as_number() <= static_cast<double>(kMaxTemperature)))
        a.fail(a.path("temperature") + " holds " + v.dump() + "; every temperature must be a number in [" +
               std::to_string(kMinTemperature) + ", " + std::to_string(kMaxTemperature) + "]");
      arch.temperature.push_back(static_cast<float>(v.as_number()));
    }
  }
  const int char_keys = static_cast<int>(a.has("char_embedding_size")) +
                        static_cast<int>(a.has("char_filters")) + static_cast<int>(a.has("char_width"));
  if (char_keys != 0 && char_keys != 3)
    a.fail(a.path("char_embedding_size") + ", char_filters and char_width go together (all or none)");
  if (char_keys == 3) {
    arch.char_embedding_size = a.integer("char_embedding_size", 1, L::kMaxEmbeddingSize);
    arch.char_filters = a.integer("char_filters", 1, L::kMaxEmbeddingSize);
    arch.char_width = a.integer("char_width", 1, L::kMaxCharWidth);
    if (arch.char_width % 2 == 0) a.fail(a.path("char_width") + " must be odd");
  }
  if (a.has("ngram")) {
    if (arch.task != Task::kClassify || arch.output != Output::kSoftmax)
      a.fail(a.path("ngram") + " (an n-gram part) is only for classifiers with output \"softmax\"");
    const Json& g = a.get("ngram");
    if (!g.is_object()) a.fail(a.path("ngram") + " must be an object");
    const Fields n(a.file(), g, "architecture.ngram.");
    n.only({"order", "mix", "keys"});
    arch.ngram_order = static_cast<int>(n.integer("order", 1, static_cast<std::size_t>(kMaxNgramOrder)));
    const Json& mix = n.get("mix");
    if (!mix.is_number() || !(mix.as_number() > 0.0 && mix.as_number() <= L::kMaxNgramMix))
      n.fail(n.path("mix") + " must be a number in (0, " + std::to_string(static_cast<int>(L::kMaxNgramMix)) +
             "]");
    arch.ngram_mix = static_cast<float>(mix.as_number());
    arch.ngram_keys = n.integer("keys", 1, L::kMaxNgramKeys);
  }
  return arch;
}

std::vector<std::string> read_labels(const Fields& top, const Architecture& arch) {
  const Json& j = top.get("labels");
  if (!j.is_array() || j.size() == 0) top.fail("\"labels\" must be a non-empty array of strings");
  if (j.size() > ModelHeaderLimits::kMaxLabels)
    top.fail("\"labels\" has " + std::to_string(j.size()) + " entries; at most " +
             std::to_string(ModelHeaderLimits::kMaxLabels) + " are allowed");
  if (arch.output != Output::kSigmoid && j.size() < 2)
    top.fail("\"labels\" must have at least 2 entries for output " + std::string(to_string(arch.output)));
  std::vector<std::string> labels;
  labels.reserve(j.size());
  for (const Json& l : j.items()) {
    if (!l.is_string() || l.as_string().empty() || l.as_string().size() > ModelHeaderLimits::kMaxLabelBytes)
      top.fail("every label must be a string of 1 to " + std::to_string(ModelHeaderLimits::kMaxLabelBytes) +
               " bytes");
    for (const char c : l.as_string())
      if (static_cast<unsigned char>(c) < 0x20 || c == 0x7F)
        top.fail("label " + quoted(l.as_string()) + " contains a control character");
    labels.push_back(l.as_string());
  }
  std::vector<std::string_view> sorted(labels.begin(), labels.end());
  std::sort(sorted.begin(), sorted.end());
  const auto dup = std::adjacent_find(sorted.begin(), sorted.end());
  if (dup != sorted.end()) top.fail("label " + quoted(*dup) + " appears twice");
  if (arch.task == Task::kTag && arch.tag_scheme != TagScheme::kNone) {
    const std::string prefixes = arch.tag_scheme == TagScheme::kBio ? "BI" : "BIES";
    for (const std::string& l : labels)
      if (l != "O" && (l.size() < 3 || l[1] != '-' || prefixes.find(l[0]) == std::string::npos))
        top.fail("tag " + quoted(l) + " does not follow the " + to_string(arch.tag_scheme) +
                 " scheme (O or " + (arch.tag_scheme == TagScheme::kBio ? "B-/I-" : "B-/I-/E-/S-") + "TYPE)");
  }
  return labels;
}

TokenizerSettings read_tokenizer(const Fields& t) {
  t.only({"mode", "nfkc", "case_fold", "fold_digits", "keep_punctuation", "max_tokens"});
  TokenizerSettings s;
  const std::string mode = t.str("mode");
  try {
    s.mode = tokenizer_mode_from_string(mode);
  } catch (const Error& e) {
    t.fail(t.path("mode") + ": " + e.what());
  }
  s.nfkc = t.boolean("nfkc");
  s.case_fold = t.boolean("case_fold");
  s.fold_digits = t.boolean("fold_digits");
  s.keep_punctuation = t.boolean("keep_punctuation");
  s.max_tokens = t.integer("max_tokens", 0, ModelHeaderLimits::kMaxTokensSetting);
  return s;
}

std::vector<std::string> read_vocabulary(const Fields& top) {
  const Json& j = top.get("vocabulary");
  if (!j.is_array() || j.size() < 2)
    top.fail("\"vocabulary\" must be an array of at least 2 tokens (\"<pad>\", \"<unk>\")");
  if (j.size() > ModelHeaderLimits::kMaxVocabulary)
    top.fail("\"vocabulary\" has " + std::to_string(j.size()) + " tokens; at most " +
             std::to_string(ModelHeaderLimits::kMaxVocabulary) + " are allowed");
  std::vector<std::string> tokens;
  tokens.reserve(j.size());
  for (const Json& v : j.items()) {
    if (!v.is_string() || v.as_string().size() > ModelHeaderLimits::kMaxTokenBytes)
      top.fail("every vocabulary entry must be a string of at most " +
               std::to_string(ModelHeaderLimits::kMaxTokenBytes) + " bytes");
    tokens.push_back(v.as_string());
  }
  if (tokens[0] != kPaddingToken || tokens[1] != kUnknownToken)
    top.fail("\"vocabulary\" must start with \"<pad>\", \"<unk>\" (ids 0 and 1)");
  std::vector<std::string_view> sorted(tokens.begin() + 2, tokens.end());
  std::sort(sorted.begin(), sorted.end());
  const auto dup = std::adjacent_find(sorted.begin(), sorted.end());
  if (dup != sorted.end()) top.fail("vocabulary token " + quoted(*dup) + " appears twice");
  for (const std::string_view t : sorted)
    if (t == kPaddingToken || t == kUnknownToken)
      top.fail("vocabulary token " + quoted(t) + " is reserved for id 0 or 1");
  return tokens;
}

std::vector<std::string> read_characters(const Fields& top) {
  const Json& j = top.get("characters");
  if (!j.is_array() || j.size() < 2 || j.size() > ModelHeaderLimits::kMaxCharacters)
    top.fail("\"characters\" must be an array of 2 to " + std::to_string(ModelHeaderLimits::kMaxCharacters) +
             " strings (\"<pad>\", \"<unk>\", then grapheme clusters)");
  std::vector<std::string> chars;
  chars.reserve(j.size());
  for (const Json& v : j.items()) {
    if (!v.is_string() || v.as_string().empty() || v.as_string().size() > ModelHeaderLimits::kMaxTokenBytes)
      top.fail("every \"characters\" entry must be a non-empty string of at most " +
               std::to_string(ModelHeaderLimits::kMaxTokenBytes) + " bytes");
    chars.push_back(v.as_string());
  }
  if (chars[0] != kPaddingToken || chars[1] != kUnknownToken)
    top.fail("\"characters\" must start with \"<pad>\", \"<unk>\" (ids 0 and 1)");
  std::vector<std::string_view> sorted(chars.begin() + 2, chars.end());
  std::sort(sorted.begin(), sorted.end());
  const auto dup = std::adjacent_find(sorted.begin(), sorted.end());
  if (dup != sorted.end()) top.fail("character " + quoted(*dup) + " appears twice in \"characters\"");
  return chars;
}

}  // namespace

ModelHeader parse_model_header(std::string_view header_json, const std::string& name) {
  const Json h = Json::parse(header_json, name + ": header JSON");
  const Fields top(name, h, "");
  if (!h.is_object()) top.fail("not a JSON object");
  ModelHeader out;
  out.format = top.str("format");
  if (out.format != "gyre-model" && out.format != "gyre-checkpoint")
    top.fail("\"format\" is " + quoted(out.format) + "; expected \"gyre-model\" or \"gyre-checkpoint\"");
  const Json& arch = top.get("architecture");
  if (!arch.is_object()) top.fail("\"architecture\" must be an object");
  out.architecture = read_architecture(Fields(name, arch, "architecture."));
  out.labels = read_labels(top, out.architecture);
  const std::size_t temperatures = out.architecture.temperature.size();
  const std::size_t expected = out.architecture.output == Output::kSigmoid ? out.labels.size() : 1;
  if (temperatures != 0 && temperatures != expected)
    top.fail("\"architecture.temperature\" has " + std::to_string(temperatures) + " values; output " +
             to_string(out.architecture.output) + " with " + std::to_string(out.labels.size()) +
             " labels needs " + std::to_string(expected));
  const std::size_t thresholds = out.architecture.label_thresholds.size();
  if (thresholds != 0 && thresholds != out.labels.size())
    top.fail("\"architecture.label_thresholds\" has " + std::to_string(thresholds) + " values for " +
             std::to_string(out.labels.size()) + " labels");
  const Json& tok = top.get("tokenizer");
  if (!tok.is_object()) top.fail("\"tokenizer\" must be an object");
  out.tokenizer = read_tokenizer(Fields(name, tok, "tokenizer."));
  out.vocabulary = read_vocabulary(top);
  if (out.architecture.has_char_encoder()) {
    out.characters = read_characters(top);
  } else if (top.has("characters")) {
    top.fail("\"characters\" is only for a model with a character encoder (architecture.char_filters)");
  }
  return out;
}

// ---- writing ------------------------------------------------------------------------------------

namespace {

/// The shortest decimal that reads back as the same float (0.3f is written "0.3").
double shortest(float v) {
  char buf[32];
  const auto r = std::to_chars(buf, buf + sizeof buf, v);
  *r.ptr = '\0';
  return std::strtod(buf, nullptr);
}

}  // namespace

std::string model_header_json(const ModelHeader& h) {
  const Architecture& a = h.architecture;
  Json arch = Json::object();
  arch.set("task", Json::string(to_string(a.task)));
  arch.set("cell", Json::string(to_string(a.cell)));
  arch.set("embedding_size", Json::number(static_cast<double>(a.embedding_size)));
  arch.set("hidden_size", Json::number(static_cast<double>(a.hidden_size)));
  arch.set("layers", Json::number(static_cast<double>(a.layers)));
  arch.set("bidirectional", Json::boolean(a.bidirectional));
  if (a.task == Task::kClassify) arch.set("pooling", Json::string(to_string(a.pooling)));
  arch.set("output", Json::string(to_string(a.output)));
  if (a.task == Task::kClassify && a.output == Output::kSigmoid)
    arch.set("multi_label_threshold", Json::number(shortest(a.multi_label_threshold)));
  if (a.task == Task::kClassify && a.output == Output::kSigmoid && !a.label_thresholds.empty()) {
    Json t = Json::array();
    for (const float v : a.label_thresholds) t.push_back(Json::number(shortest(v)));
    arch.set("label_thresholds", std::move(t));
  }
  if (a.task == Task::kTag) arch.set("tag_scheme", Json::string(to_string(a.tag_scheme)));
  if (!a.temperature.empty()) {
    Json t = Json::array();
    for (const float v : a.temperature) t.push_back(Json::number(shortest(v)));
    arch.set("temperature", std::move(t));
  }
  if (a.has_char_encoder()) {
    arch.set("char_embedding_size", Json::number(static_cast<double>(a.char_embedding_size)));
    arch.set("char_filters", Json::number(static_cast<double>(a.char_filters)));
    arch.set("char_width", Json::number(static_cast<double>(a.char_width)));
  }
  if (a.has_ngram_part()) {
    Json g = Json::object();
    g.set("order", Json::number(static_cast<double>(a.ngram_order)));
    g.set("mix", Json::number(shortest(a.ngram_mix)));
    g.set("keys", Json::number(static_cast<double>(a.ngram_keys)));
    arch.set("ngram", std::move(g));
  }
  Json labels = Json::array();
  for (const auto& l : h.labels) labels.push_back(Json::string(l));
  const TokenizerSettings& s = h.tokenizer;
  Json tok = Json::object();
  tok.set("mode", Json::string(to_string(s.mode)));
  tok.set("nfkc", Json::boolean(s.nfkc));
  tok.set("case_fold", Json::boolean(s.case_fold));
  tok.set("fold_digits", Json::boolean(s.fold_digits));
  tok.set("keep_punctuation", Json::boolean(s.keep_punctuation));
  tok.set("max_tokens", Json::number(static_cast<double>(s.max_tokens)));
  Json vocab = Json::array();
  for (const auto& t : h.vocabulary) vocab.push_back(Json::string(t));
  Json top = Json::object();
  top.set("format", Json::string(h.format));
  top.set("architecture", std::move(arch));
  top.set("labels", std::move(labels));
  top.set("tokenizer", std::move(tok));
  top.set("vocabulary", std::move(vocab));
  if (a.has_char_encoder()) {
    Json chars = Json::array();
    for (const auto& c : h.characters) chars.push_back(Json::string(c));
    top.set("characters", std::move(chars));
  }
  std::string out = top.dump();
  parse_model_header(out, "model header");  // the writer never writes what the reader refuses
  return out;
}

// ---- tensors ------------------------------------------------------------------------------------

std::vector<ModelTensor> model_tensors(const ModelHeader& h) {
  const Architecture& a = h.architecture;
  const std::uint64_t E = a.embedding_size, H = a.hidden_size, GH = a.gates() * H, F = a.features();
  const std::uint64_t C = h.labels.size(), V = h.vocabulary.size();
  std::vector<ModelTensor> out;
  out.push_back({"tokens.vectors", V, E, true});
  if (a.has_char_encoder()) {
    const std::uint64_t Ec = a.char_embedding_size;
    out.push_back({"chars.vectors", h.characters.size(), Ec, true});
    out.push_back({"chars.w_filter", a.char_filters, a.char_width * Ec, true});
    out.push_back({"chars.b_filter", 1, a.char_filters, false});
  }
  for (std::size_t k = 0; k < a.layers; ++k)
    for (std::size_t d = 0; d < a.directions(); ++d) {
      const std::string p = "rnn.l" + std::to_string(k) + (d == 0 ? ".fwd." : ".bwd.");
      out.push_back({p + "w_input", GH, k == 0 ? a.input_size() : F, true});
      out.push_back({p + "w_hidden", GH, H, true});
      out.push_back({p + "b_input", 1, GH, false});
      if (a.cell == Cell::kGru) out.push_back({p + "b_hidden", 1, GH, false});
    }
  out.push_back({"readout.w", C, F, true});
  out.push_back({"readout.b", 1, C, false});
  if (a.output == Output::kCrf) {
    out.push_back({"crf.transitions", C, C, false});
    out.push_back({"crf.start", 1, C, false});
    out.push_back({"crf.end", 1, C, false});
  }
  if (a.has_ngram_part()) {
    // Keys front-coded (at least 3 bytes each, gyre/runtime/ngram_part_file.hpp); weights stored
    // class-major, so an i8 file has one scale per class.
    out.push_back({"ngram.keys", 1, 3 * static_cast<std::uint64_t>(a.ngram_keys), false, true});
    out.push_back({"ngram.w", C, a.ngram_keys, true});
    out.push_back({"ngram.b", 1, C, false});
  }
  return out;
}

void check_model_tensors(const ModelHeader& h, const ModelFile& file) {
  for (const ModelTensor& m : model_tensors(h)) {
    const TensorInfo* t = file.find(m.name);
    if (t == nullptr)
      throw Error(file.name() + ": tensor \"" + m.name + "\" is missing (the header describes a " +
                  to_string(h.architecture.cell) + " " + to_string(h.architecture.task) + " model)");
    if (m.bytes) {
      if (t->dtype != DType::kU8 || t->shape.size() != 1 || t->cols < m.cols)
        throw Error(file.name() + ": tensor \"" + m.name + "\" must be u8 bytes of shape [n], n >= " +
                    std::to_string(m.cols) + "; it is " + to_string(t->dtype) + " " + t->shape_string());
      continue;
    }
    if (t->dtype == DType::kU8)
      throw Error(file.name() + ": tensor \"" + m.name + "\" holds bytes (u8); the model needs numbers");
    if (t->shape.size() != 2 || t->rows != m.rows || t->cols != m.cols)
      throw Error(file.name() + ": tensor \"" + m.name + "\" has shape " + t->shape_string() +
                  ", the header needs [" + std::to_string(m.rows) + " x " + std::to_string(m.cols) + "]");
  }
}

}  // namespace gyre::runtime
