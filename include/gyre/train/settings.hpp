#pragma once
// Settings are typed once. A SettingInfo describes one setting: key, type, allowed values or
// range, default and help. A SettingTable<Config> binds descriptions to the fields of a config
// struct; from it come the JSON config (read and written), the command-line options
// (src/cli/options.hpp), the range checks and the README's option table (`gyre options`).
//
// Adding a setting (see also /work/team/BOARD.md):
//   1. add the typed field to the config struct (an enum class for a choice, std::optional<E> or
//      std::optional<bool> when "auto" is allowed);
//   2. add one entry to the struct's table (train_settings() in src/train/config.cpp), e.g.
//        integer(&TrainConfig::layers, {.key = "layers", .group = kModel, .help = "...",
//                                       .min = 1, .max = 32});
//   3. use the field. The option --layers, the JSON key, its --help line, its range check and
//      the README row follow; tests/cli checks the README table against `gyre options`.

#include <algorithm>
#include <functional>
#include <limits>
#include <optional>
#include <string>
#include <string_view>
#include <type_traits>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/suggest.hpp"

namespace gyre::train {

enum class SettingType {
  kFlag,      // JSON true/false; options --x and --no-x
  kAutoFlag,  // JSON true/false/"auto"; options --x and --no-x (or a named opposite)
  kInteger,   // JSON integer within [min, max]
  kReal,      // JSON number within [min, max] (min exclusive when min_exclusive), always finite
  kText,      // JSON string (a path, a name)
  kChoice,    // JSON string, one of `choices`
  kList,      // command line only: comma-separated values, each checked as `item_type`
};

struct SettingChoice {
  std::string name;
  std::string help;
};

struct SettingInfo {
  std::string key{};    // JSON key, snake_case; the option is "--" + key with '-' for '_'
  std::string group{};  // heading in --help and in the README table
  std::string help{};   // one line, lower case, no final period
  SettingType type = SettingType::kText;
  std::vector<SettingChoice> choices{};  // kChoice (also the "auto" entry when allowed)
  double min = -std::numeric_limits<double>::infinity();
  double max = std::numeric_limits<double>::infinity();
  bool min_exclusive = false;
  bool max_exclusive = false;
  std::string note{};              // shown after the range, e.g. "0 = no limit"
  std::string value_name{};        // placeholder in --help ("N", "FILE"); derived from the type if empty
  std::string negative{};          // kFlag/kAutoFlag: option name that turns it off (default no-<key>)
  nlohmann::json default_value{};  // filled by SettingTable from Config{} or given for CLI options
  SettingType item_type = SettingType::kInteger;  // kList items
  bool positional = false;                        // a command's positional argument (MODEL, DIR)
  bool required = false;                          // no default: the command needs it

  /// "--hidden-size" (or the bare name of a positional).
  std::string option() const;
  /// "--no-nfkc" / "--unidirectional" for flags, "" otherwise.
  std::string negative_option() const;
  /// Placeholder for the value in --help: value_name or one derived from the type.
  std::string placeholder() const;
  /// What is allowed, for help and tables: "integer >= 1", "number in [0, 1)", "lstm | gru".
  std::string allowed_text() const;
  /// The default as shown to users ("128", "0.002", "lstm", "on", "auto", "" for none).
  std::string default_text() const;
};

/// Checks a JSON value against the description and returns it (integers as integers, reals as
/// doubles). Throws ConfigError(key, ...) saying what is allowed, with a suggestion for a choice.
nlohmann::json check_setting_value(const SettingInfo& s, const nlohmann::json& value);

/// Text typed on the command line -> the checked JSON value. Integers are plain decimal digits;
/// reals are decimal numbers with an optional exponent; "nan" and "inf" are refused.
nlohmann::json parse_setting_text(const SettingInfo& s, std::string_view text);

/// "hidden_size" -> "hidden-size".
std::string dashed(std::string_view key);

/// A setting's JSON value as a user types it: strings bare, reals in the shortest form that reads
/// back the same ("0", "0.002", not JSON's "0.0"), anything else as JSON.
std::string value_text(const nlohmann::json& value);

/// Reads a JSON settings file: refuses invalid JSON, a top level that is not an object and a key
/// given twice in one object (ParseError with the file and line).
nlohmann::json read_settings_file(const std::string& path);

/// Line (1-based) where `key` is first used as an object key in the JSON file; 0 if not found.
std::size_t settings_key_line(const std::string& path, const std::string& key);

template <typename Config>
struct Setting {
  SettingInfo info;
  std::function<nlohmann::json(const Config&)> get;
  std::function<void(Config&, const nlohmann::json&)> set;  // the value passed check_setting_value
};

template <typename Config>
class SettingTable {
 public:
  explicit SettingTable(std::vector<Setting<Config>> settings) : settings_(std::move(settings)) {
    const Config defaults{};
    for (auto& s : settings_) {
      s.info.default_value = s.get(defaults);
      keys_.push_back(s.info.key);
    }
  }

  const std::vector<Setting<Config>>& all() const noexcept { return settings_; }
  const std::vector<std::string>& keys() const noexcept { return keys_; }

  const Setting<Config>* find(std::string_view key) const {
    for (const auto& s : settings_)
      if (s.info.key == key) return &s;
    return nullptr;
  }
  const Setting<Config>& at(std::string_view key) const {
    const auto* s = find(key);
    GYRE_CHECK(s != nullptr, "no setting '" + std::string(key) + "'");
    return *s;
  }

  /// Every setting, in table order.
  nlohmann::json to_json(const Config& c) const {
    nlohmann::json j = nlohmann::json::object();
    for (const auto& s : settings_) j[s.info.key] = s.get(c);
    return j;
  }

  /// Missing keys keep the default; unknown keys and null values are refused (ConfigError naming
  /// the key, with a suggestion for a misspelt key); every value is checked against its type.
  Config from_json(const nlohmann::json& j) const {
    if (!j.is_object()) throw ConfigError("config", "expected a JSON object of settings");
    Config c{};
    for (const auto& [key, value] : j.items()) {
      const auto* s = find(key);
      if (s == nullptr) throw ConfigError(key, "unknown setting" + did_you_mean(key, keys_));
      if (value.is_null())
        throw ConfigError(
            key, "null is not a value; leave the key out for the default (" + s->info.default_text() + ")");
      s->set(c, check_setting_value(s->info, value));
    }
    return c;
  }

  /// Checks every field of a config built in code against its description.
  void check(const Config& c) const {
    for (const auto& s : settings_) check_setting_value(s.info, s.get(c));
  }

 private:
  std::vector<Setting<Config>> settings_;
  std::vector<std::string> keys_;
};

// ---- builders: one per field type --------------------------------------------------------------

template <typename E>
struct ChoiceOf {
  E value;
  SettingChoice choice;
};

template <typename Config>
Setting<Config> flag(bool Config::*field, SettingInfo info) {
  info.type = SettingType::kFlag;
  return {std::move(info), [field](const Config& c) { return nlohmann::json(c.*field); },
          [field](Config& c, const nlohmann::json& v) { c.*field = v.get<bool>(); }};
}

/// true / false / "auto" (std::nullopt).
template <typename Config>
Setting<Config> auto_flag(std::optional<bool> Config::*field, SettingInfo info) {
  info.type = SettingType::kAutoFlag;
  return {
      std::move(info),
      [field](const Config& c) { return (c.*field) ? nlohmann::json(*(c.*field)) : nlohmann::json("auto"); },
      [field](Config& c, const nlohmann::json& v) {
        c.*field = v.is_boolean() ? std::optional<bool>(v.get<bool>()) : std::nullopt;
      }};
}

template <typename Config, typename Int>
Setting<Config> integer(Int Config::*field, SettingInfo info) {
  static_assert(std::is_integral_v<Int>);
  info.type = SettingType::kInteger;
  info.min = std::max(info.min, static_cast<double>(std::numeric_limits<Int>::min()));
  info.max = std::min(info.max, static_cast<double>(std::numeric_limits<Int>::max()));
  return {std::move(info), [field](const Config& c) { return nlohmann::json(c.*field); },
          [field](Config& c, const nlohmann::json& v) { c.*field = v.get<Int>(); }};
}

template <typename Config>
Setting<Config> real(double Config::*field, SettingInfo info) {
  info.type = SettingType::kReal;
  return {std::move(info), [field](const Config& c) { return nlohmann::json(c.*field); },
          [field](Config& c, const nlohmann::json& v) { c.*field = v.get<double>(); }};
}

template <typename Config>
Setting<Config> text(std::string Config::*field, SettingInfo info) {
  info.type = SettingType::kText;
  return {std::move(info), [field](const Config& c) { return nlohmann::json(c.*field); },
          [field](Config& c, const nlohmann::json& v) { c.*field = v.get<std::string>(); }};
}

template <typename Config, typename E>
Setting<Config> choice(E Config::*field, SettingInfo info, std::vector<ChoiceOf<E>> values) {
  info.type = SettingType::kChoice;
  for (const auto& v : values) info.choices.push_back(v.choice);
  return {std::move(info),
          [field, values](const Config& c) {
            for (const auto& v : values)
              if (v.value == c.*field) return nlohmann::json(v.choice.name);
            GYRE_CHECK(false, "a setting holds a value outside its table");
            return nlohmann::json();
          },
          [field, values](Config& c, const nlohmann::json& j) {
            for (const auto& v : values)
              if (v.choice.name == j.get<std::string>()) c.*field = v.value;
          }};
}

/// A choice where "auto" (std::nullopt) is decided later (from the data).
template <typename Config, typename E>
Setting<Config> choice(std::optional<E> Config::*field, SettingInfo info, SettingChoice automatic,
                       std::vector<ChoiceOf<E>> values) {
  info.type = SettingType::kChoice;
  info.choices.push_back(automatic);
  for (const auto& v : values) info.choices.push_back(v.choice);
  const std::string auto_name = automatic.name;
  return {std::move(info),
          [field, values, auto_name](const Config& c) {
            if (!(c.*field)) return nlohmann::json(auto_name);
            for (const auto& v : values)
              if (v.value == *(c.*field)) return nlohmann::json(v.choice.name);
            GYRE_CHECK(false, "a setting holds a value outside its table");
            return nlohmann::json();
          },
          [field, values](Config& c, const nlohmann::json& j) {
            c.*field = std::nullopt;
            for (const auto& v : values)
              if (v.choice.name == j.get<std::string>()) c.*field = v.value;
          }};
}

}  // namespace gyre::train
