#pragma once
// Command-line options made from typed setting descriptions (gyre/train/settings.hpp).
//
// Every option of every command is described once: training settings in
// gyre::train::train_settings(), the other options in command_options() (options.cpp). A command
// binds an option by key; the option's name, placeholder, default, help and checks come from the
// description, so an option means the same in every command that has it. `gyre options` lists
// them all (the README's table is that list; tests/cli checks it).

#include <CLI/CLI.hpp>

#include <functional>
#include <stdexcept>
#include <string>
#include <string_view>
#include <type_traits>
#include <utility>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/train/settings.hpp"

namespace gyre::cli {

/// A usage mistake found while parsing: printed as one "gyre: error: ..." line, exit code 2.
class UsageError : public std::runtime_error {
 public:
  using std::runtime_error::runtime_error;
};

/// Adds the option(s) described by `info`: a flag pair (--x and its opposite, which --help shows
/// in the help of --x) for kFlag/kAutoFlag, a positional for info.positional, else an option
/// with one value. Values are parsed and checked with train::parse_setting_text (a bad value
/// throws UsageError naming the option, with a suggestion), then given to `on_value`. Giving a
/// flag and its opposite throws UsageError. Records the use for option_uses().
CLI::Option* add_setting_option(CLI::App& sub, const train::SettingInfo& info,
                                std::function<void(const nlohmann::json&)> on_value);

/// The options that are not training settings (model, input, format, ...), in listing order.
const std::vector<train::SettingInfo>& command_options();
/// command_options() entry by key; GYRE_CHECK when there is none.
const train::SettingInfo& command_option(std::string_view key);

/// Binds a command option to a typed variable: the variable starts at the description's
/// default; a given value replaces it.
template <typename T>
CLI::Option* bind_option(CLI::App& sub, std::string_view key, T& target) {
  const train::SettingInfo& info = command_option(key);
  auto assign = [&target](const nlohmann::json& v) {
    if constexpr (std::is_same_v<T, std::string>) {
      target = v.get<std::string>();
    } else {
      target = v.get<T>();
    }
  };
  if (!info.default_value.is_null()) assign(info.default_value);
  return add_setting_option(sub, info, assign);
}

/// Binds a choice option to an enum; `values` pairs each enum value with its choice name and
/// must list exactly the description's choices (checked at start-up).
template <typename E>
CLI::Option* bind_choice(CLI::App& sub, std::string_view key, E& target,
                         std::vector<std::pair<E, std::string>> values) {
  const train::SettingInfo& info = command_option(key);
  GYRE_CHECK(values.size() == info.choices.size(),
             "choices of --" + info.key + " do not match its description");
  for (std::size_t i = 0; i < values.size(); ++i)
    GYRE_CHECK(values[i].second == info.choices[i].name, "choice " + values[i].second + " of " + info.key);
  auto assign = [&target, values](const nlohmann::json& v) {
    for (const auto& [value, name] : values)
      if (name == v.get<std::string>()) target = value;
  };
  if (!info.default_value.is_null()) assign(info.default_value);
  return add_setting_option(sub, info, assign);
}

/// A check for an option with a fixed set of values: a bad value is refused in one line that
/// lists the choices and suggests the closest ("'jsnol' is not one of tsv, jsonl; did you mean
/// 'jsonl'?"), as the settings' choices are. The --help placeholder lists the choices.
CLI::Validator one_of(std::vector<std::string> choices);

/// One option of one command, as bound (for `gyre options` and the README table).
struct OptionUse {
  std::string command;
  train::SettingInfo info;
};
std::vector<OptionUse>& option_uses();

}  // namespace gyre::cli
