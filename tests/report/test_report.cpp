// HTML reports (gyre/report/html_report.hpp): structure of the page, charts, escaping, no
// external references, errors on missing files. The run directory is written by hand here so the
// test needs no training; its layout follows src/train/trainer.cpp (config.json, log.jsonl,
// metrics.json, best-dev-metrics.json).

#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <string>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/report/html_report.hpp"

namespace fs = std::filesystem;
using namespace gyre::report;

namespace {

std::size_t count(const std::string& text, const std::string& what) {
  std::size_t n = 0;
  for (auto pos = text.find(what); pos != std::string::npos; pos = text.find(what, pos + what.size())) ++n;
  return n;
}

std::string between(const std::string& text, const std::string& start, const std::string& end) {
  const auto a = text.find(start);
  REQUIRE(a != std::string::npos);
  const auto b = text.find(end, a);
  REQUIRE(b != std::string::npos);
  return text.substr(a, b - a);
}

fs::path fresh_dir(const std::string& name) {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "report" / name;
  fs::remove_all(dir);
  fs::create_directories(dir);
  return dir;
}

fs::path write_run(const std::string& name) {
  const fs::path dir = fresh_dir(name);
  gyre::write_file_atomic(
      dir / "config.json",
      R"({"train": "data/<train>.tsv", "cell": "gru", "hidden_size": 16, "epochs": 4, "seed": 1})");
  std::string log;
  const double losses[] = {1.2, 0.8, 0.55, 0.5};
  const double acc[] = {0.5, 0.7, 0.8, 0.78};
  for (int e = 0; e < 4; ++e)
    log += "{\"epoch\": " + std::to_string(e + 1) + ", \"train_loss\": " + std::to_string(losses[e]) +
           ", \"dev\": {\"loss\": 0.9, \"accuracy\": " + std::to_string(acc[e]) +
           ", \"macro_f1\": 0.6}, \"learning_rate\": 0.002, \"seconds\": 1.5, \"tokens_per_second\": 9000, "
           "\"improved\": " +
           (e < 3 ? "true" : "false") + "}\n";
  gyre::write_file_atomic(dir / "log.jsonl", log);
  gyre::write_file_atomic(dir / "metrics.json",
                          R"({"outcome": "finished", "epochs": 4, "best_epoch": 3, "metric": "accuracy",
                              "best_metric": 0.8, "dev": {"loss": 0.9, "accuracy": 0.8, "macro_f1": 0.6},
                              "parameters": 1234, "seconds": 6.0})");
  gyre::write_file_atomic(dir / "best-dev-metrics.json", R"({"task": "classification", "accuracy": 0.8,
    "classes": [{"name": "a<b>&c", "precision": 1.0, "recall": 0.5, "f1": 0.6667, "support": 2, "predicted": 1},
                {"name": "plain", "precision": 0.75, "recall": 1.0, "f1": 0.8571, "support": 3, "predicted": 4}],
    "confusion": {"labels": ["a<b>&c", "plain"], "counts": [[1, 1], [0, 3]], "rows": "gold", "columns": "predicted"}})");
  return dir;
}

}  // namespace

TEST_CASE("html_escape escapes the five special characters", "[report]") {
  REQUIRE(html_escape("a<b>&\"c'") == "a&lt;b&gt;&amp;&quot;c&#39;");
  REQUIRE(html_escape("plain text") == "plain text");
}

TEST_CASE("line chart has one polyline per series and one circle per finite point", "[report]") {
  const std::vector<Series> s{{"one", {1, 2, 3}, {0.1, 0.2, 0.3}},
                              {"two", {1, 2, 3}, {0.3, std::nan(""), 0.1}}};
  const std::string svg = line_chart_svg("T<1>", "epoch", "loss", s);
  REQUIRE(count(svg, "<polyline") == 2);
  REQUIRE(count(svg, "<circle") == 5);  // the NaN point is left out
  REQUIRE(svg.find("T&lt;1&gt;") != std::string::npos);
  // x ticks are whole epochs 1, 2, 3 (nice axis with step 1)
  REQUIRE(svg.find(">1</text>") != std::string::npos);
  REQUIRE(svg.find(">3</text>") != std::string::npos);
  REQUIRE_THROWS_AS(line_chart_svg("t", "x", "y", {{"bad", {1, 2}, {1}}}), gyre::Error);
}

TEST_CASE("bar chart draws bars, error bars only where the spread is not zero, and seed dots", "[report]") {
  const std::string svg =
      bar_chart_svg("dev", "accuracy", {"lstm-h8", "gru-h8"}, {0.8, 0.7}, {0.05, 0.0}, {{0.75, 0.85}, {0.7}});
  REQUIRE(count(svg, "class=\"bar\"") == 2);
  REQUIRE(count(svg, "class=\"err\"") == 3);  // one whisker + two caps for the first bar only
  REQUIRE(count(svg, "class=\"seed\"") == 3);
}

TEST_CASE("run report: settings, curves with one point per epoch, escaped labels, shaded confusion matrix",
          "[report]") {
  const fs::path dir = write_run("run");
  const fs::path written = write_report(dir);
  REQUIRE(written == dir / "report.html");
  const std::string html = gyre::read_file(written);
  REQUIRE(html.rfind("<!DOCTYPE html>", 0) == 0);
  REQUIRE(html.find("</html>") != std::string::npos);
  REQUIRE(count(html, "<svg") == 2);
  REQUIRE(count(html, "<svg") == count(html, "</svg>"));
  // Loss chart: train loss and dev loss, 4 epochs each.
  const std::string loss_chart = between(html, "aria-label=\"Loss per epoch\"", "</svg>");
  REQUIRE(count(loss_chart, "<polyline") == 2);
  REQUIRE(count(loss_chart, "<circle") == 8);
  const std::string dev_chart = between(html, "aria-label=\"Dev score per epoch\"", "</svg>");
  REQUIRE(count(dev_chart, "<circle") == 8);
  // Labels from the data are escaped everywhere; the raw form never appears.
  REQUIRE(html.find("a<b>&c") == std::string::npos);
  REQUIRE(count(html, "a&lt;b&gt;&amp;c") >= 3);  // score table + confusion row + column
  REQUIRE(html.find("data/&lt;train&gt;.tsv") != std::string::npos);
  // Confusion matrix: 3 non-zero cells shaded by their share of the gold row, the zero cell
  // plain; the 3-of-3 cell is the darkest (share 1 -> alpha 0.08 + 0.85 = 0.93), 1-of-2 -> 0.505.
  const std::string cm = between(html, "<table class=\"cm\">", "</table>");
  REQUIRE(count(cm, "background:rgba(") == 3);
  REQUIRE(count(cm, "class=\"zero\">0<") == 1);
  REQUIRE(count(cm, "rgba(31,95,153,0.505)\">1<") == 2);
  REQUIRE(cm.find("rgba(31,95,153,0.930);color:#fff\">3<") != std::string::npos);
  // Self-contained: no links to anything, no scripts.
  REQUIRE(html.find("http") == std::string::npos);
  REQUIRE(html.find("<script") == std::string::npos);
  REQUIRE(html.find("src=") == std::string::npos);
  SECTION("explicit output path") {
    const fs::path other = dir / "elsewhere.html";
    REQUIRE(write_report(dir, other) == other);
    REQUIRE(fs::exists(other));
  }
}

TEST_CASE("compare report: table, best marked, error-bar chart, significance", "[report]") {
  const fs::path dir = fresh_dir("compare");
  gyre::write_file_atomic(dir / "compare.json",
                          R"({"format": "gyre-compare", "version": 1, "metric": "accuracy",
    "train": "t.tsv", "dev": "d.tsv", "test": null, "seeds": 2, "best": "gru-h8",
    "configs": [
      {"name": "lstm-h8", "parameters": 100, "model_bytes": 400, "dev": {"mean": 0.7, "std": 0.02, "values": [0.68, 0.72]},
       "test": null, "train_seconds": {"mean": 1.0}, "tokens_per_second": {"mean": 5000}},
      {"name": "gru-h8", "parameters": 80, "model_bytes": 320, "dev": {"mean": 0.75, "std": 0.0, "values": [0.75, 0.75]},
       "test": null, "train_seconds": {"mean": 0.9}, "tokens_per_second": {"mean": 5500}}],
    "runs": [{"name": "lstm-h8-s1", "seed": 1, "epochs": 2, "dev_metric": 0.68}],
    "significance": {"a": "gru-h8", "b": "lstm-h8", "set": "dev", "seed": 1, "examples": 40, "accuracy_a": 0.75,
      "accuracy_b": 0.68, "mcnemar_exact": {"only_a": 6, "only_b": 1, "p_value": 0.125},
      "paired_bootstrap": {"samples": 1000, "wins_a": 930, "wins_b": 40, "p_value": 0.07}}})");
  const std::string html = gyre::read_file(write_report(dir));
  REQUIRE(count(html, "<svg") == 1);
  REQUIRE(count(html, "class=\"bar\"") == 2);
  REQUIRE(count(html, "class=\"err\"") == 3);  // gru has std 0: no whisker
  REQUIRE(count(html, "class=\"seed\"") == 4);
  REQUIRE(html.find("<tr class=\"best\"><td class=\"k\">gru-h8") != std::string::npos);
  REQUIRE(html.find("McNemar exact") != std::string::npos);
  REQUIRE(html.find("0.1250") != std::string::npos);
  REQUIRE(html.find("http") == std::string::npos);
}

TEST_CASE("report refuses directories that are neither a run nor a comparison", "[report]") {
  const fs::path dir = fresh_dir("empty");
  REQUIRE_THROWS_AS(write_report(dir), gyre::FormatError);
  REQUIRE_THROWS_AS(write_report(dir / "missing"), gyre::IoError);
  gyre::write_file_atomic(dir / "compare.json", "{not json");
  REQUIRE_THROWS_AS(write_report(dir), gyre::ParseError);
  const fs::path run = write_run("broken-log");
  gyre::write_file_atomic(run / "log.jsonl", "{\"epoch\": 1}\n{oops\n");
  try {
    write_report(run);
    FAIL("expected a ParseError");
  } catch (const gyre::ParseError& e) {
    REQUIRE(e.line() == 2);
  }
}
