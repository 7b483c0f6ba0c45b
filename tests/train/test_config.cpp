// The typed settings table: JSON in and out, checks, suggestions, the settings file reader.

#include <catch2/catch.hpp>

#include <cmath>
#include <filesystem>
#include <set>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/suggest.hpp"
#include "gyre/train/config.hpp"

namespace {

using Catch::Matchers::Contains;
using gyre::ConfigError;
using gyre::train::TrainConfig;
using nlohmann::json;

TrainConfig with(const json& j) {
  return gyre::train::config_from_json(j);
}

std::filesystem::path scratch(const std::string& name, const std::string& content) {
  const auto dir = std::filesystem::path(GYRE_TEST_TMP_DIR) / "config";
  std::filesystem::create_directories(dir);
  gyre::write_file_atomic(dir / name, content);
  return dir / name;
}

}  // namespace

TEST_CASE("edit distance counts insertions, deletions, substitutions and adjacent swaps", "[config]") {
  // Worked examples of the optimal string alignment distance (by hand).
  CHECK(gyre::edit_distance("", "abc") == 3);
  CHECK(gyre::edit_distance("epoch", "epochs") == 1);
  CHECK(gyre::edit_distance("kitten", "sitting") == 3);  // the classic Levenshtein example
  CHECK(gyre::edit_distance("gur", "gru") == 1);         // one transposition
  CHECK(gyre::edit_distance("ca", "abc") == 3);          // OSA (not unrestricted Damerau: 2)
  CHECK(gyre::closest_match("--epoch", {"--epochs", "--seed"}) == std::optional<std::string>("--epochs"));
  CHECK(gyre::closest_match("--hidden", {"--hidden-size", "--layers"}) ==
        std::optional<std::string>("--hidden-size"));
  CHECK_FALSE(gyre::closest_match("--frobnicate", {"--epochs", "--seed"}));
}

TEST_CASE("the defaults round-trip through JSON and every key is described once", "[config]") {
  const json defaults = gyre::train::default_config_json();
  CHECK(gyre::train::config_to_json(with(defaults)) == defaults);
  CHECK(defaults.at("hidden_size") == 128);
  CHECK(defaults.at("cell") == "lstm");
  CHECK(defaults.at("bidirectional") == "auto");
  CHECK(defaults.at("metric") == "auto");
  std::set<std::string> keys;
  for (const auto& s : gyre::train::train_settings().all()) {
    INFO(s.info.key);
    CHECK(keys.insert(s.info.key).second);
    CHECK(s.info.key.find_first_not_of("abcdefghijklmnopqrstuvwxyz_0123456789") == std::string::npos);
    CHECK_FALSE(s.info.help.empty());
    CHECK_FALSE(s.info.group.empty());
  }
  CHECK(keys.size() == defaults.size());
}

TEST_CASE("typed values: enums, auto and flags", "[config]") {
  const TrainConfig c = with({{"cell", "gru"},
                              {"bidirectional", true},
                              {"output", "crf"},
                              {"optimizer", "sgd"},
                              {"schedule", "cosine"},
                              {"metric", "span_f1"},
                              {"tokenizer", "chars"},
                              {"task", "tag"}});
  CHECK(c.cell == gyre::nn::CellType::kGru);
  CHECK(c.bidirectional == std::optional<bool>(true));
  CHECK(c.output == gyre::model::OutputKind::kCrf);
  CHECK(c.optimizer == gyre::optim::OptimizerKind::kSgd);
  CHECK(c.schedule == gyre::optim::ScheduleKind::kCosine);
  CHECK(c.metric == gyre::train::Metric::kSpanF1);
  CHECK(c.tokenizer == gyre::text::TokenizerMode::kChars);
  CHECK(c.task == gyre::data::Task::kTag);
  const TrainConfig d = with(json::object());
  CHECK_FALSE(d.bidirectional);
  CHECK_FALSE(d.output);
  CHECK_FALSE(d.task);
  CHECK(gyre::train::config_to_json(c).at("bidirectional") == true);
}

TEST_CASE("bad settings name the key and say what is allowed", "[config]") {
  CHECK_THROWS_WITH(with({{"hiden_size", 3}}),
                    Contains("hiden_size") && Contains("did you mean 'hidden_size'"));
  CHECK_THROWS_WITH(with({{"cell", "lstn"}}),
                    Contains("'lstn' is not one of lstm, gru; did you mean 'lstm'"));
  CHECK_THROWS_WITH(with({{"hidden_size", 16.5}}), Contains("hidden_size") && Contains("integer"));
  CHECK_THROWS_WITH(with({{"hidden_size", nullptr}}), Contains("null is not a value") && Contains("128"));
  CHECK_THROWS_WITH(with({{"layers", 1000}}), Contains("1000 is out of range: expected integer in [1, 32]"));
  CHECK_THROWS_WITH(with({{"hidden_size", 0}}), Contains("hidden_size"));
  CHECK_THROWS_WITH(with({{"dev_fraction", 1}}), Contains("expected number in (0, 1)"));
  CHECK_THROWS_WITH(with({{"bidirectional", "yes"}}), Contains("true, false or \"auto\""));
  CHECK_THROWS_WITH(with({{"threads", 100000}}), Contains("threads"));
  CHECK_THROWS_WITH(with({{"seed", -1}}), Contains("seed"));
  CHECK_THROWS_WITH(with({{"nfkc", 1}}), Contains("true or false"));
  CHECK_THROWS_AS(with(json::array()), ConfigError);
  // Combinations are checked by validate().
  TrainConfig c;
  c.train = "x.tsv";
  c.max_vocab_size = 2;
  CHECK_THROWS_WITH(gyre::train::validate(c), Contains("max_vocab_size"));
  c = TrainConfig{};
  c.train = "x.tsv";
  c.task = gyre::data::Task::kTag;
  c.metric = gyre::train::Metric::kMacroF1;
  CHECK_THROWS_WITH(gyre::train::validate(c), Contains("metric"));
  c = TrainConfig{};
  c.train = "x.tsv";
  c.layers = 1000;  // built in code: the table's range still applies
  CHECK_THROWS_WITH(gyre::train::validate(c), Contains("layers"));
}

TEST_CASE("command-line text is parsed strictly", "[config]") {
  const auto& table = gyre::train::train_settings();
  using gyre::train::parse_setting_text;
  CHECK(parse_setting_text(table.at("learning_rate").info, "1e-3") == json(0.001));
  CHECK(parse_setting_text(table.at("epochs").info, "12") == json(12));
  CHECK(parse_setting_text(table.at("seed").info, "18446744073709551615") == json(18446744073709551615ULL));
  CHECK_THROWS_WITH(parse_setting_text(table.at("epochs").info, "12abc"), Contains("not a whole number"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("epochs").info, "1.5"), Contains("not a whole number"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("epochs").info, "99999999999999999999"),
                    Contains("out of range"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("epochs").info, "0"), Contains("out of range"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("learning_rate").info, "nan"), Contains("not a number"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("learning_rate").info, "inf"), Contains("not a number"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("learning_rate").info, "1e999"),
                    Contains("not a finite number"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("dropout").info, "1"), Contains("[0, 1)"));
  CHECK_THROWS_WITH(parse_setting_text(table.at("pooling").info, "avg"), Contains("last, mean, max"));
}

TEST_CASE("settings files: a key given twice is refused with its line", "[config]") {
  const auto dup = scratch("dup.json", "{\n  \"epochs\": 3,\n  \"cell\": \"gru\",\n  \"epochs\": 5\n}\n");
  CHECK_THROWS_WITH(gyre::train::read_settings_file(dup.string()),
                    Contains("dup.json:4") && Contains("\"epochs\" is given twice (first on line 2)"));
  const auto bad = scratch("bad.json", "{\"epochs\": 3,}\n");
  CHECK_THROWS_AS(gyre::train::read_settings_file(bad.string()), gyre::ParseError);
  const auto list = scratch("list.json", "[1, 2]\n");
  CHECK_THROWS_WITH(gyre::train::read_settings_file(list.string()), Contains("expected a JSON object"));
  const auto ok = scratch("ok.json", "{\"epochs\": 3, \"nested\": {\"epochs\": 1}}\n");
  CHECK(gyre::train::read_settings_file(ok.string()).at("epochs") == 3);
  CHECK(gyre::train::settings_key_line(dup.string(), "cell") == 3);
}
