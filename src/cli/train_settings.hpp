#pragma once
// The training settings as command-line options, shared by `gyre train` and `gyre compare`:
// every key of gyre::train::TrainConfig is a long option (same name with '-' for '_'), booleans
// are flags (--x, or --no-x when on by default), and the command line wins over --config, which
// wins over the defaults.

#include <CLI/CLI.hpp>

#include <map>
#include <memory>
#include <set>
#include <string>

#include <nlohmann/json.hpp>

namespace gyre::cli {

/// Settings given on the command line, by config key.
struct TrainSettingValues {
  std::map<std::string, std::string> values;  // key -> text as typed
  std::map<std::string, bool> flags;          // key -> value set by a boolean flag
};

/// "hidden_size" -> "hidden-size".
std::string flag_name(const std::string& key);

/// Adds an option for every training setting except those in `skip`; values land in `into`.
void add_train_setting_options(CLI::App& sub, const std::shared_ptr<TrainSettingValues>& into,
                               const std::set<std::string>& skip = {});

/// Defaults, then the --config file (if any; its "out" key is removed and returned through
/// out_from_file), then the command line. Throws ParseError for a bad file, ConfigError for a
/// value that is not a number where one is needed.
nlohmann::json merge_train_settings(const std::string& config_path, const TrainSettingValues& given,
                                    std::string* out_from_file = nullptr);

/// Text of a number option as JSON of the default's type (integer, unsigned or floating).
nlohmann::json parse_setting_value(const std::string& key, const std::string& text,
                                   const nlohmann::json& default_value);

}  // namespace gyre::cli
