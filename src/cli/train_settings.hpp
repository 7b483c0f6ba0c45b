#pragma once
// The training settings (gyre::train::train_settings()) as command-line options, shared by
// `gyre train`, `gyre compare` and `gyre vocab`: every setting is a long option named after its
// key, booleans are --x / --no-x flags, and the command line wins over --config, which wins over
// the defaults.

#include <CLI/CLI.hpp>

#include <memory>
#include <set>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/options.hpp"

namespace gyre::cli {

/// Settings given on the command line, by config key, already parsed and checked.
struct TrainSettingValues {
  nlohmann::json given = nlohmann::json::object();
  bool empty() const { return given.empty(); }
};

/// Adds an option for every training setting except those in `skip` (or, when `only` is not
/// empty, just those); values land in `into`.
void add_train_setting_options(CLI::App& sub, const std::shared_ptr<TrainSettingValues>& into,
                               const std::set<std::string>& skip = {},
                               const std::set<std::string>& only = {});

/// Defaults, then the --config file (if any; its "out" key is removed and returned through
/// out_from_file), then the command line. Throws ParseError for a bad file (invalid JSON, a key
/// given twice), ConfigError for a bad value.
nlohmann::json merge_train_settings(const std::string& config_path, const TrainSettingValues& given,
                                    std::string* out_from_file = nullptr);

/// Text of a number option as JSON of the default's type (integer or floating), range unchecked.
nlohmann::json parse_setting_value(const std::string& key, const std::string& text,
                                   const nlohmann::json& default_value);

}  // namespace gyre::cli
