#include "cli/train_settings.hpp"

#include "gyre/core/error.hpp"
#include "gyre/train/config.hpp"
#include "gyre/train/settings.hpp"

namespace gyre::cli {

using nlohmann::json;

json parse_setting_value(const std::string& key, const std::string& text, const json& default_value) {
  train::SettingInfo info;
  info.key = key;
  info.type = default_value.is_number_integer() ? train::SettingType::kInteger
              : default_value.is_number()       ? train::SettingType::kReal
                                                : train::SettingType::kText;
  return train::parse_setting_text(info, text);
}

void add_train_setting_options(CLI::App& sub, const std::shared_ptr<TrainSettingValues>& into,
                               const std::set<std::string>& skip, const std::set<std::string>& only) {
  for (const auto& s : train::train_settings().all()) {
    const std::string& key = s.info.key;
    if (skip.count(key) || (!only.empty() && !only.count(key))) continue;
    train::SettingInfo info = s.info;
    info.required = false;  // --config or --resume may supply it; train::validate checks
    add_setting_option(sub, info, [into, key](const json& v) { into->given[key] = v; });
  }
}

json merge_train_settings(const std::string& config_path, const TrainSettingValues& given,
                          std::string* out_from_file) {
  json j = train::default_config_json();
  if (!config_path.empty()) {
    const json file = train::read_settings_file(config_path);
    for (const auto& [key, value] : file.items()) {
      if (key == "out") {
        if (!value.is_string())
          throw ParseError(config_path, 0, "\"out\" must be a string (the run directory)");
        if (out_from_file != nullptr) *out_from_file = value.get<std::string>();
        continue;
      }
      const auto* s = train::train_settings().find(key);
      const std::size_t line = train::settings_key_line(config_path, key);
      if (s == nullptr)
        throw ParseError(
            config_path, line,
            "unknown setting \"" + key + "\"" + did_you_mean(key, train::train_settings().keys()));
      if (value.is_null())
        throw ParseError(config_path, line,
                         "\"" + key + "\": null is not a value; leave the key out for the default (" +
                             s->info.default_text() + ")");
      try {
        j[key] = train::check_setting_value(s->info, value);
      } catch (const ConfigError& e) {
        throw ParseError(config_path, line, e.what());
      }
    }
  }
  for (const auto& [key, value] : given.given.items()) j[key] = value;
  return j;
}

}  // namespace gyre::cli
