#pragma once
// Token vocabulary and label set, and the vocab.json file that holds both together with the
// tokenizer settings (so training, evaluation and the runtime tokenize identically).
//
// Ids: 0 = padding (Vocab::kPad, token "<pad>"), 1 = unknown (Vocab::kUnk, token "<unk>"), then
// tokens by count descending, ties broken by byte order of the UTF-8 token (deterministic).
// Labels are sorted by name (byte order); a label's id is its position.

#include <cstddef>
#include <cstdint>
#include <filesystem>
#include <map>
#include <optional>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include <nlohmann/json_fwd.hpp>

#include "gyre/text/tokenizer.hpp"

namespace gyre::text {

namespace detail {
struct StringHash {
  using is_transparent = void;
  std::size_t operator()(std::string_view s) const noexcept { return std::hash<std::string_view>{}(s); }
};
using TokenIndex = std::unordered_map<std::string, std::int32_t, StringHash, std::equal_to<>>;
}  // namespace detail

class Vocab {
 public:
  static constexpr std::int32_t kPad = 0, kUnk = 1;
  static constexpr std::string_view kPadToken = "<pad>", kUnkToken = "<unk>";

  /// Only the two reserved entries.
  Vocab();
  /// tokens[i] gets id i + 2; counts parallel to tokens. Throws gyre::Error on duplicates.
  Vocab(std::vector<std::string> tokens, std::vector<std::uint64_t> counts);

  /// Id of token, kUnk when absent. The reserved spellings "<pad>"/"<unk>" map to kUnk too,
  /// so text can never produce the padding id.
  std::int32_t id(std::string_view token) const;
  /// Throws gyre::Error when id is out of range.
  const std::string& token(std::int32_t id) const;
  /// Training-split count of the token (0 for the reserved ids).
  std::uint64_t count(std::int32_t id) const;
  /// Number of ids, reserved ones included.
  std::size_t size() const { return tokens_.size(); }
  bool contains(std::string_view token) const { return id(token) != kUnk; }

  bool operator==(const Vocab& other) const { return tokens_ == other.tokens_ && counts_ == other.counts_; }

 private:
  std::vector<std::string> tokens_;
  std::vector<std::uint64_t> counts_;
  detail::TokenIndex index_;
};

/// Counts tokens as they stream by; memory grows with the number of types, not of tokens.
class VocabBuilder {
 public:
  void add(std::string_view token, std::uint64_t count = 1);
  void add(const std::vector<std::string>& tokens);
  /// Distinct tokens seen / tokens seen.
  std::size_t types() const { return counts_.size(); }
  std::uint64_t tokens() const { return total_; }
  /// Keeps tokens seen at least min_count times; max_size caps size() of the result (the two
  /// reserved ids included; 0 = no cap, otherwise must be >= 2).
  Vocab build(std::uint64_t min_count = 1, std::size_t max_size = 0) const;

 private:
  std::unordered_map<std::string, std::uint64_t, detail::StringHash, std::equal_to<>> counts_;
  std::uint64_t total_ = 0;
};

/// Label name -> count, the input of LabelSet.
using LabelCounts = std::map<std::string, std::uint64_t, std::less<>>;

class LabelSet {
 public:
  LabelSet() = default;
  /// Names in byte order of the map; ids 0..size()-1.
  explicit LabelSet(const LabelCounts& counts);
  /// Names in the given order (a model file's label order); counts parallel to names. Throws
  /// gyre::Error on duplicates or a length mismatch.
  LabelSet(std::vector<std::string> names, std::vector<std::uint64_t> counts);

  std::optional<std::int32_t> find(std::string_view label) const;
  /// Like find, but throws gyre::ParseError(path, line, "label 'x' was not seen in training").
  std::int32_t id(std::string_view label, std::string_view path, std::size_t line) const;
  /// Throws gyre::Error when id is out of range.
  const std::string& name(std::int32_t id) const;
  std::uint64_t count(std::int32_t id) const;
  std::size_t size() const { return names_.size(); }
  const std::vector<std::string>& names() const { return names_; }

  bool operator==(const LabelSet& other) const { return names_ == other.names_ && counts_ == other.counts_; }

 private:
  void index();

  std::vector<std::string> names_;
  std::vector<std::uint64_t> counts_;
  std::vector<std::int32_t> by_name_;  // ids sorted by name, for find()
};

/// Contents of vocab.json.
struct VocabFile {
  TokenizerSettings tokenizer;
  Vocab vocab;
  LabelSet labels;
  /// A model with a character encoder: its grapheme clusters ([0] "<pad>", [1] "<unk>"; see
  /// gyre/runtime/char_tokens.hpp). Empty otherwise.
  std::vector<std::string> characters;
};

/// Character list of a training corpus: the clusters of its surface tokens seen at least
/// min_count times, most frequent first (ties by bytes), at most max_size entries with "<pad>"
/// and "<unk>" (0 = no limit).
class CharacterListBuilder {
 public:
  void add(std::string_view surface_token);
  std::vector<std::string> build(std::uint64_t min_count, std::size_t max_size) const;

 private:
  std::unordered_map<std::string, std::uint64_t> counts_;
  std::vector<std::string_view> scratch_;
};

/// Writes vocab.json atomically. Format (version 1):
///   {"format": "gyre-vocab", "version": 1, "tokenizer": {...},
///    "tokens": [["<pad>", 0], ["<unk>", 0], [token, count], ...],
///    "labels": [[name, count], ...]}
/// plus "characters": ["<pad>", "<unk>", cluster, ...] when the model has a character encoder.
void save_vocab_file(const std::filesystem::path& path, const VocabFile& file);
/// Reads vocab.json; throws gyre::FormatError (path + what is wrong) on any inconsistency,
/// gyre::IoError when it cannot be read.
VocabFile load_vocab_file(const std::filesystem::path& path);

void to_json(nlohmann::json& j, const Vocab& vocab);
void from_json(const nlohmann::json& j, Vocab& vocab);
void to_json(nlohmann::json& j, const LabelSet& labels);
void from_json(const nlohmann::json& j, LabelSet& labels);

}  // namespace gyre::text
