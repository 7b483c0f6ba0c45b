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
                              "best_metric": 0.8, "dev": {"loss": 0.9, "log_loss": 0.91234567, "accuracy": 0.8,
                              "macro_f1": 0.6}, "parameters": 1234, "seconds": 6.04321,
                              "tokens_per_second": 9123.456})");
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
  // The result table speaks in human labels with rounded numbers (issue 15): no raw keys, one
  // dev loss (the clipped log_loss metric is left out beside the objective's loss).
  const std::string result = between(html, "<h2>Result</h2>", "</table>");
  CHECK(result.find("best_epoch") == std::string::npos);
  CHECK(result.find("tokens_per_second") == std::string::npos);
  CHECK(result.find(">best epoch</td><td>3<") != std::string::npos);
  CHECK(result.find(">training time (s)</td><td>6.0<") != std::string::npos);
  CHECK(result.find(">tokens per second</td><td>9123<") != std::string::npos);
  CHECK(result.find(">dev accuracy (best epoch)</td><td>0.8000<") != std::string::npos);
  CHECK(result.find(">dev macro F1 (best epoch)</td><td>0.6000<") != std::string::npos);
  CHECK(count(result, "loss") == 1);
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

TEST_CASE("compare report: verdict first, costs, curves with bands, bars from zero, hue per cell, front",
          "[report]") {
  const fs::path dir = fresh_dir("compare");
  gyre::write_file_atomic(dir / "compare.json",
                          R"({"format": "gyre-compare", "version": 2, "metric": "accuracy",
    "train": "t.tsv", "dev": "d.tsv", "test": null, "seeds": 2, "best": "gru-h8",
    "configs": [
      {"name": "lstm-h8", "cell": "lstm", "parameters": 100, "model_bytes": 400, "int8_bytes": 2048,
       "latency_ms": 0.05, "pareto": false,
       "dev": {"mean": 0.7, "std": 0.02, "values": [0.68, 0.72]},
       "test": null, "train_seconds": {"mean": 1.0}, "tokens_per_second": {"mean": 5000}},
      {"name": "gru-h8", "cell": "gru", "parameters": 80, "model_bytes": 320, "int8_bytes": 1024,
       "latency_ms": 0.04, "pareto": true,
       "dev": {"mean": 0.75, "std": 0.0, "values": [0.75, 0.75]},
       "test": null, "train_seconds": {"mean": 0.9}, "tokens_per_second": {"mean": 5500}}],
    "runs": [{"name": "lstm-h8-s1", "config": "lstm-h8", "seed": 1, "epochs": 2, "dev_metric": 0.68,
              "dev_curve": [0.6, 0.68]},
             {"name": "lstm-h8-s2", "config": "lstm-h8", "seed": 2, "epochs": 2, "dev_metric": 0.72,
              "dev_curve": [0.5, 0.72]},
             {"name": "gru-h8-s1", "config": "gru-h8", "seed": 1, "epochs": 2, "dev_metric": 0.75,
              "dev_curve": [0.7, 0.75]},
             {"name": "gru-h8-s2", "config": "gru-h8", "seed": 2, "epochs": 1, "dev_metric": 0.75,
              "dev_curve": [0.75]}],
    "head_to_head": {"a": "lstm-h8", "b": "gru-h8", "label_a": "LSTM h8", "label_b": "GRU h8", "set": "dev",
      "metric": "accuracy", "points": true, "examples": 40, "scores_a": [0.68, 0.72], "scores_b": [0.75, 0.75],
      "mean_a": 0.7, "std_a": 0.028, "mean_b": 0.75, "std_b": 0.0, "difference": -0.05,
      "two_level_bootstrap": {"low": -0.1, "high": 0.01, "samples": 2000},
      "permutation_test": {"p_value": 0.333}, "detected": false,
      "per_seed_mcnemar": [{"seed": 1, "only_a": 1, "only_b": 6, "p_value": 0.125}],
      "verdict": "no difference detectable at this budget: <LSTM> and GRU differ",
      "notes": ["WARNING: no --test file"]}})");
  const std::string html = gyre::read_file(write_report(dir));
  // The verdict comes before everything but the title; its text is escaped.
  const auto verdict = html.find("class=\"verdict\"");
  REQUIRE(verdict != std::string::npos);
  REQUIRE(verdict < html.find("<h2>"));
  REQUIRE(html.find("&lt;LSTM&gt; and GRU differ") != std::string::npos);
  REQUIRE(html.find("class=\"warning\">WARNING: no --test file") != std::string::npos);
  REQUIRE(count(html, "<svg") == 3);  // bars, curves, accuracy vs latency
  REQUIRE(count(html, "class=\"bar\"") == 2);
  REQUIRE(count(html, "class=\"err\"") == 3);  // gru has std 0: no whisker
  REQUIRE(count(html, "class=\"seed\"") == 4);
  // One hue per cell type: the LSTM bar blue, the GRU bar orange.
  REQUIRE(html.find("fill=\"#1f5f99\" fill-opacity=\"0.75\"><title>lstm-h8") != std::string::npos);
  REQUIRE(html.find("fill=\"#c0562a\" fill-opacity=\"0.75\"><title>gru-h8") != std::string::npos);
  // Bars start at zero: the lowest y tick of the bar chart is 0.
  const std::string bars = between(html, "aria-label=\"Dev accuracy (bar", "</svg>");
  REQUIRE(bars.find("text-anchor=\"end\">0.0</text>") != std::string::npos);
  // Curves: one line and one seed-range band per config; the lstm band spans 0.5..0.6 at epoch 1.
  const std::string curves = between(html, "aria-label=\"Dev accuracy per epoch", "</svg>");
  REQUIRE(count(curves, "<polyline") == 2);
  REQUIRE(count(curves, "class=\"band\"") == 2);
  // Costs and the Pareto front.
  REQUIRE(html.find("<td>2.0</td><td>0.050</td>") != std::string::npos);  // int8 KiB, ms/text of lstm-h8
  REQUIRE(count(html, "<td class=\"k\">&#9670; front</td>") == 1);
  REQUIRE(html.find("gru-h8 (front)") != std::string::npos);
  REQUIRE(html.find("<tr class=\"best\"><td class=\"k\">gru-h8") != std::string::npos);
  REQUIRE(html.find("McNemar exact, seed 1") != std::string::npos);
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

TEST_CASE("run report: reliability diagram and shaded tokens of dev mistakes (issue 17)", "[report]") {
  const fs::path dir = write_run("calibrated");
  gyre::write_file_atomic(dir / "metrics.json", R"({"outcome": "finished", "epochs": 4, "best_epoch": 3,
    "metric": "accuracy", "best_metric": 0.8, "dev": {"loss": 0.9, "accuracy": 0.8},
    "calibration": {"temperature": [1.5],
      "before": {"error": 0.1, "predictions": 4, "bins": [{"count": 2, "confidence": 0.95, "accuracy": 0.5},
                                                        {"count": 0, "confidence": 0, "accuracy": 0},
                                                        {"count": 2, "confidence": 0.7, "accuracy": 1.0}]},
      "after": {"error": 0.05, "predictions": 4, "bins": [{"count": 4, "confidence": 0.8, "accuracy": 0.75}]}},
    "dev_mistakes": [{"line": 7, "gold": "cancel", "predicted": "praise", "probability": 0.97, "text": "x",
      "why": {"method": "integrated_gradients", "label": "praise", "completeness": {"gap": 0.0001},
              "tokens": [{"token": "thanks<3", "score": 0.6}, {"token": "cancel", "score": -0.3}]}}]})");
  const std::string html = run_report_html(dir);
  const std::string cal = between(html, "<h2>Calibration</h2>", "<h2>Why");
  // Three series (diagonal, before, after); empty bins are not drawn: 2 + 2 + 1 points.
  REQUIRE(count(cal, "<polyline") == 3);
  REQUIRE(count(cal, "<circle") == 5);
  REQUIRE(cal.find("T = 1.500") != std::string::npos);
  const std::string why = between(html, "<h2>Why these dev mistakes</h2>", "<h2>Settings");
  // The strongest token is fully shaded green, the other half as strongly red; text is escaped.
  REQUIRE(why.find("rgba(46,125,50,1.00)\" title=\"0.6000\">thanks&lt;3</span>") != std::string::npos);
  REQUIRE(why.find("rgba(198,40,40,0.50)\" title=\"-0.3000\">cancel</span>") != std::string::npos);
  REQUIRE(why.find("n-gram part (logit") == std::string::npos);  // no part: no second line
}

TEST_CASE("run report: a dev mistake of a model with an n-gram part shows the part's share too", "[report]") {
  const fs::path dir = write_run("with_part");
  gyre::write_file_atomic(dir / "metrics.json", R"({"outcome": "finished", "epochs": 1, "best_epoch": 1,
    "metric": "accuracy", "best_metric": 0.8, "dev": {"loss": 0.9, "accuracy": 0.8},
    "dev_mistakes": [{"line": 3, "gold": "cancel", "predicted": "praise", "probability": 0.9, "text": "x",
      "why": {"method": "integrated_gradients", "label": "praise", "completeness": {"gap": 0.0001},
              "ngram_part": {"unit": "logit", "mix": 2.0, "bias": -0.25, "sum": 1.5, "logit": 1.25},
              "tokens": [{"token": "great", "score": 0.1, "ngram_part": 2.0},
                         {"token": "refund", "score": -0.4, "ngram_part": -0.5}]}}]})");
  const std::string why = between(run_report_html(dir), "<h2>Why these dev mistakes</h2>", "<h2>Settings");
  // The network's line: "refund" is the strongest (red, full), "great" a quarter as strong.
  REQUIRE(why.find("rgba(46,125,50,0.25)\" title=\"0.1000\">great</span>") != std::string::npos);
  REQUIRE(why.find("rgba(198,40,40,1.00)\" title=\"-0.4000\">refund</span>") != std::string::npos);
  // The part's line, shaded by its own shares: "great" strongest (green, full), "refund" a quarter.
  const std::string part = why.substr(why.find("n-gram part (logit 1.250, bias -0.250): "));
  REQUIRE(part.find("rgba(46,125,50,1.00)\" title=\"2.0000\">great</span>") != std::string::npos);
  REQUIRE(part.find("rgba(198,40,40,0.25)\" title=\"-0.5000\">refund</span>") != std::string::npos);
}

TEST_CASE("labelling trial report: one line per rule (issue 17)", "[report]") {
  const fs::path dir = fresh_dir("trial");
  gyre::write_file_atomic(dir / "labelling.json", R"({"train": "t.tsv", "test": "x.tsv", "examples": 100,
    "start": 10, "step": 5, "rounds": 2, "measure": "margin",
    "rules": [{"rule": "random", "points": [{"labelled": 10, "accuracy": 0.5}, {"labelled": 15, "accuracy": 0.6},
                                            {"labelled": 20, "accuracy": 0.65}]},
              {"rule": "diverse", "points": [{"labelled": 10, "accuracy": 0.5}, {"labelled": 15, "accuracy": 0.7},
                                             {"labelled": 20, "accuracy": 0.75}]}]})");
  const fs::path out = write_report(dir);
  const std::string html = gyre::read_file(out);
  REQUIRE(count(html, "<polyline") == 2);
  REQUIRE(html.find("<td class=\"k\">diverse</td><td>0.5000</td><td>0.7000</td><td>0.7500</td>") !=
          std::string::npos);
}

TEST_CASE("report: the last x tick label of the cost chart ends at the chart's right edge", "[report]") {
  // Latencies near 2 us give an axis 0 .. 0.0025 ms in steps of 0.0005: the last label, "0.0025",
  // is wider than twice the 16 px right margin, so centred on its tick it ran out of the chart
  // (headless Chromium's layout check caught it, tools/check_report_layout.py).
  const std::string svg =
      front_chart_svg("Test accuracy vs batch-1 latency", "ms/text", "accuracy", {"lstm-h8", "gru-h8"},
                      {0.0021, 0.0019}, {0.8, 0.82}, {"#1f5f99", "#c0562a"}, {false, true});
  // x = kWidth - kRight = 520 - 16 (the chart's right edge).
  REQUIRE(svg.find("x=\"504.0\" y=\"268\" text-anchor=\"end\">0.0025</text>") != std::string::npos);
  // Every other x tick stays centred on its tick.
  REQUIRE(count(svg, "y=\"268\" text-anchor=\"middle\">") == 5);
}

TEST_CASE("run report: a multi-label run's tuned label thresholds", "[report]") {
  const fs::path dir = write_run("thresholds");
  gyre::write_file_atomic(dir / "metrics.json", R"({"outcome": "finished", "epochs": 2, "best_epoch": 2,
    "metric": "macro_f1", "best_metric": 0.5, "dev": {"loss": 0.9, "macro_f1": 0.5},
    "label_thresholds": {"global": 0.5, "thresholds": {"billing": 0.5, "urgent<1>": 0.2893},
      "dev_macro_f1_before": 0.4, "dev_macro_f1_after": 0.6, "dev_micro_f1_before": 0.7,
      "dev_micro_f1_after": 0.72}})");
  const std::string html = run_report_html(dir);
  const std::string lt = between(html, "<h2>Label thresholds</h2>", "<h2>Settings");
  CHECK(lt.find("ties keep the global 0.50") != std::string::npos);
  CHECK(lt.find(">billing</td><td>0.500<") != std::string::npos);
  CHECK(lt.find(">urgent&lt;1&gt;</td><td>0.289<") != std::string::npos);  // escaped, rounded
  CHECK(lt.find(">dev macro F1</td><td>0.4000 &rarr; 0.6000<") != std::string::npos);
  // A run without tuned thresholds has no such section.
  const fs::path plain = write_run("no-thresholds");
  CHECK(run_report_html(plain).find("Label thresholds") == std::string::npos);
}
