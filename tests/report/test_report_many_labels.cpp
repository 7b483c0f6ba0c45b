// A run with more labels than eval::kDenseConfusionLimit: its metrics keep only the largest
// confusions (issue 10 item 3), and the report lists those instead of dropping the section.

#include <catch2/catch.hpp>

#include <filesystem>
#include <string>

#include "gyre/core/file.hpp"
#include "gyre/report/html_report.hpp"

namespace fs = std::filesystem;

TEST_CASE("run report of a many-label run lists the top confusions", "[report]") {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "report" / "many-labels";
  fs::remove_all(dir);
  fs::create_directories(dir);
  gyre::write_file_atomic(dir / "config.json", R"({"train": "t.tsv", "cell": "lstm", "epochs": 1})");
  gyre::write_file_atomic(
      dir / "log.jsonl",
      R"({"epoch": 1, "train_loss": 1.0, "dev": {"loss": 0.9, "accuracy": 0.5, "macro_f1": 0.4},)"
      R"( "learning_rate": 0.002, "seconds": 1.0, "tokens_per_second": 100, "improved": true})"
      "\n");
  gyre::write_file_atomic(dir / "metrics.json", R"({"outcome": "finished", "epochs": 1, "best_epoch": 1,
    "metric": "accuracy", "best_metric": 0.5, "dev": {"loss": 0.9, "accuracy": 0.5}})");
  gyre::write_file_atomic(dir / "best-dev-metrics.json", R"({"task": "classification", "accuracy": 0.5,
    "classes": [{"name": "x<1>", "precision": 0.5, "recall": 0.5, "f1": 0.5, "support": 2, "predicted": 2}],
    "confusion": {"top": [{"gold": "x<1>", "predicted": "y", "count": 7}, {"gold": "y", "predicted": "z", "count": 2}],
                  "off_diagonal_cells": 40, "rows": "gold", "columns": "predicted"}})");
  const std::string html = gyre::read_file(gyre::report::write_report(dir));
  CHECK(html.find("<td class=\"k\">x&lt;1&gt;</td><td class=\"k\">y</td><td>7</td>") != std::string::npos);
  CHECK(html.find("the 2 most frequent confusions of 40") != std::string::npos);
  CHECK(html.find("x<1>") == std::string::npos);
}
