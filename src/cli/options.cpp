#include "cli/options.hpp"

#include <cctype>
#include <map>
#include <memory>

#include "gyre/core/error.hpp"
#include "gyre/core/suggest.hpp"

namespace gyre::cli {

using nlohmann::json;
using train::SettingInfo;
using train::SettingType;

std::vector<OptionUse>& option_uses() {
  static std::vector<OptionUse> uses;
  return uses;
}

namespace {

std::string help_line(const SettingInfo& info) {
  std::string help = info.help;
  if (info.type == SettingType::kFlag || info.type == SettingType::kAutoFlag) {
    // Default-on flags are turned off with their opposite; default-off ones need no mention of it.
    if (info.type == SettingType::kAutoFlag || info.default_value == true)
      help += " [" + (info.type == SettingType::kAutoFlag ? std::string() : "on; ") + info.negative_option() +
              " turns it off]";
  } else if (info.type == SettingType::kInteger || info.type == SettingType::kReal ||
             info.type == SettingType::kList) {
    help += " (" + info.allowed_text() + ")";
  }
  return help;
}

// "model" -> "Model settings" as a --help heading.
std::string heading(const std::string& group) {
  std::string h = group;
  h[0] = static_cast<char>(std::toupper(static_cast<unsigned char>(h[0])));
  return h;
}

json parse_given(const SettingInfo& info, const std::string& text) {
  try {
    return train::parse_setting_text(info, text);
  } catch (const ConfigError& e) {
    throw UsageError(info.option() + ": " + e.detail());
  }
}

}  // namespace

CLI::Option* add_setting_option(CLI::App& sub, const SettingInfo& info,
                                std::function<void(const json&)> on_value) {
  option_uses().push_back({sub.get_name(), info});
  if (info.type == SettingType::kFlag || info.type == SettingType::kAutoFlag) {
    // Both flags report here; a flag and its opposite together are a contradiction.
    auto given = std::make_shared<std::map<bool, std::string>>();
    auto set = [info, on_value, given](bool value, const std::string& name) {
      given->emplace(value, name);
      if (given->size() > 1)
        throw UsageError(given->at(true) + " and " + given->at(false) + " contradict each other; give one");
      on_value(json(value));
    };
    const std::string positive = info.option(), negative = info.negative_option();
    auto* opt = sub.add_flag_callback(
        positive, [set, positive] { set(true, positive); }, help_line(info));
    if (!info.group.empty()) opt->group(heading(info.group));
    sub.add_flag_callback(
           negative, [set, negative] { set(false, negative); }, "turn off " + positive)
        ->group("");  // shown in the help of the positive flag
    return opt;
  }
  CLI::Option* opt = nullptr;
  auto callback = [info, on_value](const std::string& text) { on_value(parse_given(info, text)); };
  if (info.positional) {
    opt = sub.add_option_function<std::string>(info.key, callback, help_line(info));
  } else {
    opt = sub.add_option_function<std::string>(info.option(), callback, help_line(info));
  }
  if (!info.group.empty() && !info.positional) opt->group(heading(info.group));
  opt->type_name(info.placeholder());
  if (!info.default_text().empty()) opt->default_str(info.default_text());
  if (info.required) opt->required();
  return opt;
}

CLI::Validator one_of(std::vector<std::string> choices) {
  std::string names;
  for (const auto& c : choices) names += (names.empty() ? "" : "|") + c;
  return CLI::Validator(
      [choices](std::string& value) -> std::string {
        for (const auto& c : choices)
          if (c == value) return {};
        std::string list;
        for (const auto& c : choices) list += (list.empty() ? "" : ", ") + c;
        return "'" + value + "' is not one of " + list + did_you_mean(value, choices);
      },
      names);
}

const std::vector<SettingInfo>& command_options() {
  static const std::vector<SettingInfo> options = [] {
    std::vector<SettingInfo> o;
    return o;
  }();
  return options;
}

const SettingInfo& command_option(std::string_view key) {
  for (const auto& info : command_options())
    if (info.key == key) return info;
  GYRE_CHECK(false, "no command option '" + std::string(key) + "'");
  throw Error("unreachable");
}

}  // namespace gyre::cli
