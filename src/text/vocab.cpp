#include "gyre/text/vocab.hpp"

#include <algorithm>
#include <limits>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/runtime/char_tokens.hpp"
#include "gyre/runtime/model_header.hpp"

namespace gyre::text {

namespace {
constexpr const char* kFormatName = "gyre-vocab";
constexpr int kFormatVersion = 1;
}  // namespace

// ---- Vocab ------------------------------------------------------------------------------------

Vocab::Vocab() : Vocab({}, {}) {}

Vocab::Vocab(std::vector<std::string> tokens, std::vector<std::uint64_t> counts) {
  GYRE_CHECK(tokens.size() == counts.size(), "Vocab: tokens and counts differ in length");
  GYRE_CHECK(tokens.size() + 2 <= static_cast<std::size_t>(std::numeric_limits<std::int32_t>::max()),
             "Vocab: too many tokens for 32-bit ids");
  tokens_.reserve(tokens.size() + 2);
  counts_.reserve(tokens.size() + 2);
  tokens_.emplace_back(kPadToken);
  tokens_.emplace_back(kUnkToken);
  counts_.push_back(0);
  counts_.push_back(0);
  index_.reserve(tokens.size());
  for (std::size_t i = 0; i < tokens.size(); ++i) {
    if (tokens[i] == kPadToken || tokens[i] == kUnkToken)
      throw Error("Vocab: token '" + tokens[i] + "' is reserved");
    const auto new_id = static_cast<std::int32_t>(i + 2);
    if (!index_.emplace(tokens[i], new_id).second) throw Error("Vocab: duplicate token '" + tokens[i] + "'");
    tokens_.push_back(std::move(tokens[i]));
    counts_.push_back(counts[i]);
  }
}

std::int32_t Vocab::id(std::string_view token) const {
  const auto it = index_.find(token);
  return it == index_.end() ? kUnk : it->second;
}

const std::string& Vocab::token(std::int32_t id) const {
  GYRE_CHECK(
      id >= 0 && static_cast<std::size_t>(id) < tokens_.size(),
      "Vocab::token: id " + std::to_string(id) + " out of range [0, " + std::to_string(tokens_.size()) + ")");
  return tokens_[static_cast<std::size_t>(id)];
}

std::uint64_t Vocab::count(std::int32_t id) const {
  GYRE_CHECK(
      id >= 0 && static_cast<std::size_t>(id) < tokens_.size(),
      "Vocab::count: id " + std::to_string(id) + " out of range [0, " + std::to_string(tokens_.size()) + ")");
  return counts_[static_cast<std::size_t>(id)];
}

// ---- VocabBuilder -----------------------------------------------------------------------------

void VocabBuilder::add(std::string_view token, std::uint64_t count) {
  total_ += count;
  const auto it = counts_.find(token);
  if (it != counts_.end())
    it->second += count;
  else
    counts_.emplace(std::string(token), count);
}

void VocabBuilder::add(const std::vector<std::string>& tokens) {
  for (const auto& t : tokens) add(t);
}

Vocab VocabBuilder::build(std::uint64_t min_count, std::size_t max_size) const {
  GYRE_CHECK(max_size == 0 || max_size >= 2, "VocabBuilder::build: max_size must be 0 (no cap) or >= 2");
  std::vector<std::pair<std::string_view, std::uint64_t>> kept;
  kept.reserve(counts_.size());
  for (const auto& [token, count] : counts_)
    if (count >= min_count && token != Vocab::kPadToken && token != Vocab::kUnkToken)
      kept.emplace_back(token, count);
  // Count descending, then bytes ascending: independent of hash order, so deterministic.
  std::sort(kept.begin(), kept.end(), [](const auto& a, const auto& b) {
    return a.second != b.second ? a.second > b.second : a.first < b.first;
  });
  if (max_size != 0 && kept.size() > max_size - 2) kept.resize(max_size - 2);
  std::vector<std::string> tokens;
  std::vector<std::uint64_t> counts;
  tokens.reserve(kept.size());
  counts.reserve(kept.size());
  for (const auto& [token, count] : kept) {
    tokens.emplace_back(token);
    counts.push_back(count);
  }
  return Vocab(std::move(tokens), std::move(counts));
}

// ---- LabelSet ---------------------------------------------------------------------------------

LabelSet::LabelSet(const LabelCounts& counts) {
  names_.reserve(counts.size());
  counts_.reserve(counts.size());
  for (const auto& [name, count] : counts) {  // std::map: byte order of the names
    names_.push_back(name);
    counts_.push_back(count);
  }
  index();
}

LabelSet::LabelSet(std::vector<std::string> names, std::vector<std::uint64_t> counts)
    : names_(std::move(names)), counts_(std::move(counts)) {
  GYRE_CHECK(names_.size() == counts_.size(), "LabelSet: names and counts differ in length");
  index();
  for (std::size_t i = 1; i < by_name_.size(); ++i)
    if (names_[static_cast<std::size_t>(by_name_[i])] == names_[static_cast<std::size_t>(by_name_[i - 1])])
      throw Error("LabelSet: duplicate label '" + names_[static_cast<std::size_t>(by_name_[i])] + "'");
}

void LabelSet::index() {
  GYRE_CHECK(names_.size() <= static_cast<std::size_t>(std::numeric_limits<std::int32_t>::max()),
             "LabelSet: too many labels for 32-bit ids");
  by_name_.resize(names_.size());
  for (std::size_t i = 0; i < by_name_.size(); ++i) by_name_[i] = static_cast<std::int32_t>(i);
  std::sort(by_name_.begin(), by_name_.end(), [&](std::int32_t a, std::int32_t b) {
    return names_[static_cast<std::size_t>(a)] < names_[static_cast<std::size_t>(b)];
  });
}

std::optional<std::int32_t> LabelSet::find(std::string_view label) const {
  const auto it =
      std::lower_bound(by_name_.begin(), by_name_.end(), label, [&](std::int32_t id, std::string_view b) {
        return std::string_view(names_[static_cast<std::size_t>(id)]) < b;
      });
  if (it == by_name_.end() || names_[static_cast<std::size_t>(*it)] != label) return std::nullopt;
  return *it;
}

std::int32_t LabelSet::id(std::string_view label, std::string_view path, std::size_t line) const {
  if (const auto found = find(label)) return *found;
  throw ParseError(path, line, "label '" + std::string(label) + "' was not seen in training");
}

const std::string& LabelSet::name(std::int32_t id) const {
  GYRE_CHECK(id >= 0 && static_cast<std::size_t>(id) < names_.size(),
             "LabelSet::name: id " + std::to_string(id) + " out of range [0, " +
                 std::to_string(names_.size()) + ")");
  return names_[static_cast<std::size_t>(id)];
}

std::uint64_t LabelSet::count(std::int32_t id) const {
  GYRE_CHECK(id >= 0 && static_cast<std::size_t>(id) < names_.size(),
             "LabelSet::count: id " + std::to_string(id) + " out of range [0, " +
                 std::to_string(names_.size()) + ")");
  return counts_[static_cast<std::size_t>(id)];
}

// ---- JSON -------------------------------------------------------------------------------------

namespace {

// [[string, count], ...] -> parallel vectors; throws std::invalid_argument with a description.
void read_pairs(const nlohmann::json& j, const char* what, std::vector<std::string>& names,
                std::vector<std::uint64_t>& counts) {
  if (!j.is_array())
    throw std::invalid_argument(std::string(what) + ": expected an array of [string, count] pairs");
  names.reserve(j.size());
  counts.reserve(j.size());
  for (std::size_t i = 0; i < j.size(); ++i) {
    const auto& e = j[i];
    if (!e.is_array() || e.size() != 2 || !e[0].is_string() || !e[1].is_number_unsigned())
      throw std::invalid_argument(std::string(what) + "[" + std::to_string(i) +
                                  "]: expected [string, non-negative integer], got " + e.dump());
    names.push_back(e[0].get<std::string>());
    counts.push_back(e[1].get<std::uint64_t>());
  }
}

}  // namespace

void to_json(nlohmann::json& j, const Vocab& vocab) {
  j = nlohmann::json::array();
  for (std::size_t i = 0; i < vocab.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    j.push_back(nlohmann::json::array({vocab.token(id), vocab.count(id)}));
  }
}

void from_json(const nlohmann::json& j, Vocab& vocab) {
  std::vector<std::string> tokens;
  std::vector<std::uint64_t> counts;
  read_pairs(j, "tokens", tokens, counts);
  if (tokens.size() < 2 || tokens[0] != Vocab::kPadToken || tokens[1] != Vocab::kUnkToken)
    throw std::invalid_argument("tokens: must start with [\"<pad>\", 0], [\"<unk>\", 0]");
  for (const auto& t : tokens)
    if (!is_valid_utf8(t)) throw std::invalid_argument("tokens: a token is not valid UTF-8");
  tokens.erase(tokens.begin(), tokens.begin() + 2);
  counts.erase(counts.begin(), counts.begin() + 2);
  try {
    vocab = Vocab(std::move(tokens), std::move(counts));
  } catch (const Error& e) {
    throw std::invalid_argument(std::string("tokens: ") + e.what());
  }
}

void to_json(nlohmann::json& j, const LabelSet& labels) {
  j = nlohmann::json::array();
  for (std::size_t i = 0; i < labels.size(); ++i) {
    const auto id = static_cast<std::int32_t>(i);
    j.push_back(nlohmann::json::array({labels.name(id), labels.count(id)}));
  }
}

void from_json(const nlohmann::json& j, LabelSet& labels) {
  std::vector<std::string> names;
  std::vector<std::uint64_t> counts;
  read_pairs(j, "labels", names, counts);
  LabelCounts map;
  for (std::size_t i = 0; i < names.size(); ++i) {
    if (i > 0 && !(names[i - 1] < names[i]))
      throw std::invalid_argument("labels: names must be unique and sorted by bytes ('" + names[i - 1] +
                                  "' before '" + names[i] + "')");
    map.emplace(names[i], counts[i]);
  }
  labels = LabelSet(map);
}

void CharacterListBuilder::add(std::string_view surface_token) {
  runtime::grapheme_clusters(surface_token, scratch_);
  const std::size_t n = std::min(scratch_.size(), runtime::kMaxTokenCharacters);
  for (std::size_t i = 0; i < n; ++i) ++counts_[std::string(scratch_[i])];
}

std::vector<std::string> CharacterListBuilder::build(std::uint64_t min_count, std::size_t max_size) const {
  std::vector<std::pair<std::string_view, std::uint64_t>> kept;
  for (const auto& [c, n] : counts_)
    if (n >= min_count) kept.emplace_back(c, n);
  std::sort(kept.begin(), kept.end(), [](const auto& a, const auto& b) {
    return a.second != b.second ? a.second > b.second : a.first < b.first;
  });
  std::vector<std::string> out{std::string(runtime::kPaddingToken), std::string(runtime::kUnknownToken)};
  for (const auto& [c, n] : kept) {
    if (max_size != 0 && out.size() >= max_size) break;
    out.emplace_back(c);
  }
  return out;
}

void save_vocab_file(const std::filesystem::path& path, const VocabFile& file) {
  nlohmann::json j;
  j["format"] = kFormatName;
  j["version"] = kFormatVersion;
  j["tokenizer"] = file.tokenizer;
  j["labels"] = file.labels;
  j["tokens"] = file.vocab;
  // One [token, count] pair per line keeps big vocabularies readable and diffable.
  std::string out = "{\n";
  if (!file.characters.empty()) j["characters"] = file.characters;
  for (const char* key : {"format", "version", "tokenizer", "labels", "characters"})
    if (j.contains(key)) out += "  \"" + std::string(key) + "\": " + j[key].dump() + ",\n";
  out += "  \"tokens\": [\n";
  const auto& tokens = j["tokens"];
  for (std::size_t i = 0; i < tokens.size(); ++i)
    out += "    " + tokens[i].dump() + (i + 1 < tokens.size() ? ",\n" : "\n");
  out += "  ]\n}\n";
  write_file_atomic(path, out);
}

VocabFile load_vocab_file(const std::filesystem::path& path) {
  const std::string bytes = read_file(path);
  const std::string where = path.string();
  nlohmann::json j;
  try {
    j = nlohmann::json::parse(bytes);
  } catch (const nlohmann::json::parse_error& e) {
    throw FormatError(where, std::string("not valid JSON: ") + e.what());
  }
  if (!j.is_object() || j.value("format", "") != kFormatName)
    throw FormatError(where, "not a gyre vocabulary file (missing \"format\": \"gyre-vocab\")");
  if (!j.contains("version") || !j["version"].is_number_integer())
    throw FormatError(where, "missing integer \"version\"");
  if (j["version"].get<int>() != kFormatVersion)
    throw FormatError(where, "vocabulary format version " + j["version"].dump() +
                                 " is not supported (this gyre reads version " +
                                 std::to_string(kFormatVersion) + ")");
  for (const char* key : {"tokenizer", "tokens", "labels"})
    if (!j.contains(key)) throw FormatError(where, std::string("missing \"") + key + "\"");
  VocabFile file;
  try {
    file.tokenizer = j["tokenizer"].get<TokenizerSettings>();
  } catch (const ConfigError& e) {
    throw FormatError(where, e.what());
  }
  try {
    file.vocab = j["tokens"].get<Vocab>();
    file.labels = j["labels"].get<LabelSet>();
  } catch (const std::invalid_argument& e) {
    throw FormatError(where, e.what());
  }
  if (j.contains("characters")) {
    const auto& c = j["characters"];
    bool ok = c.is_array() && c.size() >= 2;
    for (std::size_t i = 0; ok && i < c.size(); ++i)
      ok = c[i].is_string() && !c[i].get<std::string>().empty();
    if (ok) file.characters = c.get<std::vector<std::string>>();
    if (!ok || file.characters[0] != runtime::kPaddingToken || file.characters[1] != runtime::kUnknownToken)
      throw FormatError(where,
                        "\"characters\" must be an array of strings starting with \"<pad>\", \"<unk>\"");
  }
  return file;
}

}  // namespace gyre::text
