#include "gyre/report/html_report.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"

namespace gyre::report {
namespace {

namespace fs = std::filesystem;
using nlohmann::json;

// Chart geometry in SVG user units.
constexpr double kWidth = 520, kHeight = 300, kLeft = 64, kRight = 16, kTop = 34, kBottom = 48;
const char* const kColors[] = {"#1f5f99", "#c0562a", "#3c8a4a", "#7a4ea3", "#a38a1e", "#2b8c8c"};

std::string num(double v, int decimals = 4) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", decimals, v);
  return buf;
}

// Shortest tidy label for a tick value.
std::string tick_text(double v, double step) {
  int decimals = 0;
  while (decimals < 6 &&
         std::fabs(step * std::pow(10.0, decimals) - std::round(step * std::pow(10.0, decimals))) > 1e-6)
    ++decimals;
  if (std::fabs(v) < step * 1e-6) v = 0.0;
  return num(v, decimals);
}

struct Axis {
  double lo = 0, hi = 1, step = 0.2;
};

// Ticks at multiples of 1, 2 or 5 x 10^k covering [lo, hi] with about `target` intervals.
Axis nice_axis(double lo, double hi, int target = 5) {
  if (!(hi > lo)) {
    const double pad = std::fabs(lo) > 0 ? std::fabs(lo) * 0.1 : 1.0;
    lo -= pad;
    hi += pad;
  }
  const double raw = (hi - lo) / target;
  const double mag = std::pow(10.0, std::floor(std::log10(raw)));
  double step = mag;
  for (const double m : {1.0, 2.0, 5.0, 10.0}) {
    step = m * mag;
    if (step >= raw) break;
  }
  return {std::floor(lo / step + 1e-9) * step, std::ceil(hi / step - 1e-9) * step, step};
}

struct Frame {
  Axis x, y;
  double sx(double v) const { return kLeft + (v - x.lo) / (x.hi - x.lo) * (kWidth - kLeft - kRight); }
  double sy(double v) const {
    return kHeight - kBottom - (v - y.lo) / (y.hi - y.lo) * (kHeight - kTop - kBottom);
  }
};

void svg_open(std::ostringstream& o, std::string_view title) {
  o << "<svg class=\"chart\" viewBox=\"0 0 " << kWidth << ' ' << kHeight << "\" width=\"" << kWidth
    << "\" height=\"" << kHeight << "\" role=\"img\" aria-label=\"" << html_escape(title) << "\">\n";
  o << "<text class=\"title\" x=\"" << kLeft << "\" y=\"20\">" << html_escape(title) << "</text>\n";
}

void y_axis(std::ostringstream& o, const Frame& f, std::string_view y_label) {
  const int n = static_cast<int>(std::lround((f.y.hi - f.y.lo) / f.y.step));
  for (int i = 0; i <= n; ++i) {
    const double v = f.y.lo + i * f.y.step;
    const double y = f.sy(v);
    o << "<line class=\"grid\" x1=\"" << kLeft << "\" x2=\"" << kWidth - kRight << "\" y1=\"" << num(y, 1)
      << "\" y2=\"" << num(y, 1) << "\"/>";
    o << "<text class=\"tick\" x=\"" << kLeft - 6 << "\" y=\"" << num(y + 4, 1) << "\" text-anchor=\"end\">"
      << tick_text(v, f.y.step) << "</text>\n";
  }
  o << "<line class=\"axis\" x1=\"" << kLeft << "\" x2=\"" << kLeft << "\" y1=\"" << kTop << "\" y2=\""
    << kHeight - kBottom << "\"/>\n";
  const double mid = (kTop + kHeight - kBottom) / 2;
  o << "<text class=\"label\" x=\"14\" y=\"" << mid << "\" text-anchor=\"middle\" transform=\"rotate(-90 14 "
    << mid << ")\">" << html_escape(y_label) << "</text>\n";
}

std::string cell_shade(double share) {
  // Blue with opacity by share of the gold row; dark text on light cells, white on dark.
  const double a = std::clamp(share, 0.0, 1.0);
  std::string style = "background:rgba(31,95,153," + num(0.08 + 0.85 * a, 3) + ")";
  if (a > 0.5) style += ";color:#fff";
  return style;
}

const char* const kStyle = R"(<style>
body{font:15px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif;color:#1d2330;background:#f6f7f9;margin:0}
main{max-width:1120px;margin:0 auto;padding:24px 28px 48px}
h1{font-size:24px;margin:0 0 4px}h2{font-size:18px;margin:28px 0 10px;border-bottom:1px solid #d8dde5;padding-bottom:4px}
.sub{color:#5b6475;margin:0 0 12px}
table{border-collapse:collapse;background:#fff;margin:6px 0 12px;font-variant-numeric:tabular-nums}
th,td{border:1px solid #d8dde5;padding:4px 10px;text-align:right}th{background:#eef1f5}
td.k,th.k{text-align:left}tr.best td{font-weight:600;background:#fff7df}
.cm td{min-width:44px;text-align:center}.cm td.zero{color:#9aa3b2}.cm th.corner{background:#fff;font-weight:400;color:#5b6475;font-size:12px}
.charts{display:flex;flex-wrap:wrap;gap:16px}
.chart{background:#fff;border:1px solid #d8dde5}
.chart .title{font-weight:600;font-size:14px}.chart .tick{font-size:11px;fill:#5b6475}
.chart .label{font-size:12px;fill:#1d2330}.chart .grid{stroke:#e6e9ee}.chart .axis{stroke:#7a8394}
.chart polyline{fill:none;stroke-width:2}.chart .err{stroke:#1d2330;stroke-width:1.5}
.cols{display:flex;flex-wrap:wrap;gap:24px;align-items:flex-start}
.note{color:#5b6475;font-size:13px}
</style>
)";

std::string page(std::string_view title, const std::string& body) {
  std::string out = "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n<title>";
  out += html_escape(title);
  out += "</title>\n";
  out += kStyle;
  out += "</head>\n<body>\n<main>\n";
  out += body;
  out +=
      "<p class=\"note\">Made by gyre report. Numbers come from the run files; a model's scores on its own "
      "dev "
      "set are optimistic: confirm on held-out data before use.</p>\n</main>\n</body>\n</html>\n";
  return out;
}

json read_json_file(const fs::path& path) {
  const std::string text = read_file(path);
  try {
    return json::parse(text);
  } catch (const json::parse_error& e) {
    throw ParseError(path.string(), 0, std::string("not valid JSON: ") + e.what());
  }
}

std::string value_text(const json& v) {
  if (v.is_string()) return v.get<std::string>();
  if (v.is_number_float()) {
    char buf[64];
    std::snprintf(buf, sizeof buf, "%.6g", v.get<double>());
    return buf;
  }
  return v.dump();
}

// A number from an object, or NaN when absent/not a number.
double get_num(const json& j, std::initializer_list<const char*> path) {
  const json* cur = &j;
  for (const char* k : path) {
    if (!cur->is_object() || !cur->contains(k)) return std::nan("");
    cur = &(*cur)[k];
  }
  return cur->is_number() ? cur->get<double>() : std::nan("");
}

std::string fmt_or_dash(double v, int decimals = 4) {
  return std::isfinite(v) ? num(v, decimals) : "&ndash;";
}

std::string scores_table(const json& rows, const char* name_key, const char* first_head,
                         bool with_counts_gold_pred) {
  std::ostringstream o;
  o << "<table><tr><th class=\"k\">" << first_head << "</th><th>precision</th><th>recall</th><th>F1</th>";
  if (with_counts_gold_pred) o << "<th>gold</th><th>predicted</th>";
  o << "</tr>\n";
  for (const auto& r : rows) {
    o << "<tr><td class=\"k\">" << html_escape(r.value(name_key, "")) << "</td><td>"
      << fmt_or_dash(get_num(r, {"precision"})) << "</td><td>" << fmt_or_dash(get_num(r, {"recall"}))
      << "</td><td>" << fmt_or_dash(get_num(r, {"f1"})) << "</td>";
    if (with_counts_gold_pred) {
      const char* gold_key = r.contains("support") ? "support" : "gold";
      o << "<td>" << fmt_or_dash(get_num(r, {gold_key}), 0) << "</td><td>"
        << fmt_or_dash(get_num(r, {"predicted"}), 0) << "</td>";
    }
    o << "</tr>\n";
  }
  o << "</table>\n";
  return o.str();
}

std::string confusion_html(const json& cm) {
  if (!cm.is_object() || !cm.contains("labels") || !cm.contains("counts")) return {};
  const auto& labels = cm["labels"];
  const auto& counts = cm["counts"];
  std::ostringstream o;
  o << "<table class=\"cm\"><tr><th class=\"corner\">gold &darr; / predicted &rarr;</th>";
  for (const auto& l : labels)
    o << "<th>" << html_escape(l.is_string() ? l.get<std::string>() : l.dump()) << "</th>";
  o << "</tr>\n";
  for (std::size_t g = 0; g < counts.size() && g < labels.size(); ++g) {
    double total = 0;
    for (const auto& c : counts[g]) total += c.is_number() ? c.get<double>() : 0.0;
    o << "<tr><th class=\"k\">"
      << html_escape(labels[g].is_string() ? labels[g].get<std::string>() : labels[g].dump()) << "</th>";
    for (const auto& c : counts[g]) {
      const double v = c.is_number() ? c.get<double>() : 0.0;
      // Empty cells stay white so the errors that do occur stand out.
      if (v > 0)
        o << "<td style=\"" << cell_shade(total > 0 ? v / total : 0.0) << "\">" << num(v, 0) << "</td>";
      else
        o << "<td class=\"zero\">0</td>";
    }
    o << "</tr>\n";
  }
  o << "</table>\n<p class=\"note\">Rows: gold label; columns: predicted label; shading: share of the gold "
       "row.</p>\n";
  return o.str();
}

}  // namespace

std::string html_escape(std::string_view text) {
  std::string out;
  out.reserve(text.size());
  for (const char c : text) {
    switch (c) {
      case '&':
        out += "&amp;";
        break;
      case '<':
        out += "&lt;";
        break;
      case '>':
        out += "&gt;";
        break;
      case '"':
        out += "&quot;";
        break;
      case '\'':
        out += "&#39;";
        break;
      default:
        out += c;
    }
  }
  return out;
}

std::string line_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                           const std::vector<Series>& series) {
  double xlo = INFINITY, xhi = -INFINITY, ylo = INFINITY, yhi = -INFINITY;
  for (const auto& s : series) {
    GYRE_CHECK(s.x.size() == s.y.size(), "chart series needs as many x as y values");
    for (std::size_t i = 0; i < s.x.size(); ++i) {
      if (!std::isfinite(s.x[i]) || !std::isfinite(s.y[i])) continue;
      xlo = std::min(xlo, s.x[i]);
      xhi = std::max(xhi, s.x[i]);
      ylo = std::min(ylo, s.y[i]);
      yhi = std::max(yhi, s.y[i]);
    }
  }
  if (!std::isfinite(xlo)) xlo = 0, xhi = 1, ylo = 0, yhi = 1;
  Frame f;
  f.x = nice_axis(xlo, xhi, std::min(8, std::max(1, static_cast<int>(xhi - xlo))));
  if (f.x.step < 1.0 && xhi - xlo >= 1.0) f.x = {std::floor(xlo), std::ceil(xhi), 1.0};
  f.y = nice_axis(ylo, yhi);
  std::ostringstream o;
  svg_open(o, title);
  y_axis(o, f, y_label);
  const int nx = static_cast<int>(std::lround((f.x.hi - f.x.lo) / f.x.step));
  for (int i = 0; i <= nx; ++i) {
    const double v = f.x.lo + i * f.x.step;
    const double x = f.sx(v);
    o << "<line class=\"axis\" x1=\"" << num(x, 1) << "\" x2=\"" << num(x, 1) << "\" y1=\""
      << kHeight - kBottom << "\" y2=\"" << kHeight - kBottom + 4 << "\"/>";
    o << "<text class=\"tick\" x=\"" << num(x, 1) << "\" y=\"" << kHeight - kBottom + 16
      << "\" text-anchor=\"middle\">" << tick_text(v, f.x.step) << "</text>\n";
  }
  o << "<line class=\"axis\" x1=\"" << kLeft << "\" x2=\"" << kWidth - kRight << "\" y1=\""
    << kHeight - kBottom << "\" y2=\"" << kHeight - kBottom << "\"/>\n";
  o << "<text class=\"label\" x=\"" << (kLeft + kWidth - kRight) / 2 << "\" y=\"" << kHeight - 10
    << "\" text-anchor=\"middle\">" << html_escape(x_label) << "</text>\n";
  for (std::size_t k = 0; k < series.size(); ++k) {
    const auto& s = series[k];
    const char* color = kColors[k % std::size(kColors)];
    o << "<polyline class=\"series\" stroke=\"" << color << "\" points=\"";
    bool first = true;
    for (std::size_t i = 0; i < s.x.size(); ++i) {
      if (!std::isfinite(s.x[i]) || !std::isfinite(s.y[i])) continue;
      o << (first ? "" : " ") << num(f.sx(s.x[i]), 1) << ',' << num(f.sy(s.y[i]), 1);
      first = false;
    }
    o << "\"/>\n";
    for (std::size_t i = 0; i < s.x.size(); ++i) {
      if (!std::isfinite(s.x[i]) || !std::isfinite(s.y[i])) continue;
      o << "<circle cx=\"" << num(f.sx(s.x[i]), 1) << "\" cy=\"" << num(f.sy(s.y[i]), 1)
        << "\" r=\"3\" fill=\"" << color << "\"><title>" << html_escape(s.name) << " @ "
        << tick_text(s.x[i], 1.0) << ": " << num(s.y[i]) << "</title></circle>\n";
    }
    // Legend at the top right, one entry per series.
    const double lx = kWidth - kRight - 150, ly = kTop + 4 + 16.0 * static_cast<double>(k);
    o << "<rect x=\"" << lx << "\" y=\"" << ly << "\" width=\"12\" height=\"3\" fill=\"" << color << "\"/>"
      << "<text class=\"tick\" x=\"" << lx + 18 << "\" y=\"" << ly + 5 << "\">" << html_escape(s.name)
      << "</text>\n";
  }
  o << "</svg>\n";
  return o.str();
}

std::string bar_chart_svg(std::string_view title, std::string_view y_label,
                          const std::vector<std::string>& names, const std::vector<double>& means,
                          const std::vector<double>& errors, const std::vector<std::vector<double>>& points) {
  GYRE_CHECK(names.size() == means.size() && means.size() == errors.size() && errors.size() == points.size(),
             "bar chart needs one mean, error and point list per name");
  double lo = INFINITY, hi = -INFINITY;
  for (std::size_t i = 0; i < means.size(); ++i) {
    lo = std::min({lo, means[i] - errors[i]});
    hi = std::max({hi, means[i] + errors[i]});
    for (const double p : points[i]) lo = std::min(lo, p), hi = std::max(hi, p);
  }
  if (!std::isfinite(lo)) lo = 0, hi = 1;
  // Bars start at the bottom of a zoomed axis: differences between configs are usually small.
  const double span = std::max(hi - lo, 1e-6);
  Frame f;
  f.y = nice_axis(std::max(0.0, lo - 0.25 * span), hi + 0.1 * span);
  f.x = {0, static_cast<double>(std::max<std::size_t>(names.size(), 1)), 1};
  std::ostringstream o;
  svg_open(o, title);
  y_axis(o, f, y_label);
  o << "<line class=\"axis\" x1=\"" << kLeft << "\" x2=\"" << kWidth - kRight << "\" y1=\""
    << kHeight - kBottom << "\" y2=\"" << kHeight - kBottom << "\"/>\n";
  const double slot = (kWidth - kLeft - kRight) / f.x.hi;
  for (std::size_t i = 0; i < names.size(); ++i) {
    const double cx = kLeft + slot * (static_cast<double>(i) + 0.5);
    const double w = std::min(60.0, slot * 0.6);
    const double top = f.sy(means[i]);
    const char* color = kColors[i % std::size(kColors)];
    o << "<rect class=\"bar\" x=\"" << num(cx - w / 2, 1) << "\" y=\"" << num(top, 1) << "\" width=\""
      << num(w, 1) << "\" height=\"" << num(kHeight - kBottom - top, 1) << "\" fill=\"" << color
      << "\" fill-opacity=\"0.75\"><title>" << html_escape(names[i]) << ": " << num(means[i]) << " &#177; "
      << num(errors[i]) << "</title></rect>\n";
    if (errors[i] > 0) {
      const double y1 = f.sy(means[i] - errors[i]), y2 = f.sy(means[i] + errors[i]);
      o << "<line class=\"err\" x1=\"" << num(cx, 1) << "\" x2=\"" << num(cx, 1) << "\" y1=\"" << num(y1, 1)
        << "\" y2=\"" << num(y2, 1) << "\"/>";
      for (const double y : {y1, y2})
        o << "<line class=\"err\" x1=\"" << num(cx - 8, 1) << "\" x2=\"" << num(cx + 8, 1) << "\" y1=\""
          << num(y, 1) << "\" y2=\"" << num(y, 1) << "\"/>";
      o << "\n";
    }
    for (const double p : points[i])
      o << "<circle class=\"seed\" cx=\"" << num(cx + w / 2 + 8, 1) << "\" cy=\"" << num(f.sy(p), 1)
        << "\" r=\"2.5\" fill=\"#1d2330\"/>";
    o << "<text class=\"tick\" x=\"" << num(cx, 1) << "\" y=\"" << kHeight - kBottom + 16
      << "\" text-anchor=\"middle\">" << html_escape(names[i]) << "</text>\n";
  }
  o << "</svg>\n";
  return o.str();
}

std::string run_report_html(const fs::path& run_dir) {
  const json config = read_json_file(run_dir / "config.json");
  const json metrics = read_json_file(run_dir / "metrics.json");
  json full_dev = json::object();
  std::error_code ec;
  if (fs::exists(run_dir / "best-dev-metrics.json", ec))
    full_dev = read_json_file(run_dir / "best-dev-metrics.json");
  else if (metrics.contains("dev") && metrics["dev"].is_object())
    full_dev = metrics["dev"];

  // log.jsonl: one epoch per line.
  const fs::path log_path = run_dir / "log.jsonl";
  std::istringstream log_in(read_file(log_path));
  std::vector<json> epochs;
  std::string line;
  std::size_t line_no = 0;
  while (std::getline(log_in, line)) {
    ++line_no;
    if (line.empty()) continue;
    try {
      epochs.push_back(json::parse(line));
    } catch (const json::parse_error& e) {
      throw ParseError(log_path.string(), line_no, std::string("not valid JSON: ") + e.what());
    }
    if (!epochs.back().is_object())
      throw ParseError(log_path.string(), line_no, "expected a JSON object per epoch");
  }

  const bool tagging =
      full_dev.value("task", "") == "tagging" ||
      (metrics.contains("dev") && metrics["dev"].is_object() && metrics["dev"].contains("span_f1"));
  const std::string title = "gyre run: " + run_dir.filename().string();
  std::ostringstream b;
  b << "<h1>" << html_escape(title) << "</h1>\n<p class=\"sub\">" << html_escape(config.value("cell", "?"))
    << ", hidden " << html_escape(value_text(config.value("hidden_size", json(nullptr)))) << ", trained on "
    << html_escape(config.value("train", "?")) << "</p>\n";

  // Summary.
  b << "<h2>Result</h2>\n<table>\n";
  auto row = [&](const std::string& k, const std::string& v) {
    b << "<tr><td class=\"k\">" << html_escape(k) << "</td><td>" << html_escape(v) << "</td></tr>\n";
  };
  for (const char* k :
       {"outcome", "epochs", "best_epoch", "metric", "best_metric", "train_examples", "dev_examples",
        "vocabulary_size", "parameters", "seconds", "tokens_per_second", "threads"})
    if (metrics.contains(k)) row(k, value_text(metrics[k]));
  if (metrics.contains("dev") && metrics["dev"].is_object()) {
    // Scalars as they are; averages ({"precision", "recall", "f1"}) by their F1; lists are shown
    // in their own tables below.
    for (const auto& [k, v] : metrics["dev"].items()) {
      if (k == "task" || k == "examples" || k == "correct") continue;
      if (v.is_number())
        row("dev " + k + " (best epoch)", value_text(v));
      else if (v.is_object() && v.contains("f1") && v["f1"].is_number())
        row("dev " + k + " F1 (best epoch)", value_text(v["f1"]));
      else if (v.is_object() && v.contains("error") && v["error"].is_number())
        row("dev " + k + " error (best epoch)", value_text(v["error"]));
    }
  }
  b << "</table>\n";

  // Curves.
  Series loss{"train loss", {}, {}}, dev_loss{"dev loss", {}, {}};
  const std::string metric_key = tagging ? "span_f1" : "accuracy";
  Series dev_metric{"dev " + metric_key, {}, {}}, dev_f1{"dev macro_f1", {}, {}};
  for (std::size_t i = 0; i < epochs.size(); ++i) {
    const double e =
        std::isfinite(get_num(epochs[i], {"epoch"})) ? get_num(epochs[i], {"epoch"}) : double(i + 1);
    loss.x.push_back(e);
    loss.y.push_back(get_num(epochs[i], {"train_loss"}));
    dev_loss.x.push_back(e);
    dev_loss.y.push_back(get_num(epochs[i], {"dev", "loss"}));
    dev_metric.x.push_back(e);
    dev_metric.y.push_back(get_num(epochs[i], {"dev", metric_key.c_str()}));
    dev_f1.x.push_back(e);
    dev_f1.y.push_back(get_num(epochs[i], {"dev", tagging ? "token_accuracy" : "macro_f1"}));
  }
  dev_f1.name = tagging ? "dev token_accuracy" : "dev macro_f1";
  b << "<h2>Training curves</h2>\n<div class=\"charts\">\n";
  b << line_chart_svg("Loss per epoch", "epoch", "loss", {loss, dev_loss});
  b << line_chart_svg("Dev score per epoch", "epoch", "score", {dev_metric, dev_f1});
  b << "</div>\n";

  // Per-epoch table.
  b << "<h2>Epochs</h2>\n<table><tr><th>epoch</th><th>train loss</th><th>dev loss</th><th>dev " << metric_key
    << "</th><th>learning rate</th><th>seconds</th><th>tokens/s</th></tr>\n";
  for (const auto& e : epochs) {
    b << "<tr" << (e.value("improved", false) ? " class=\"best\"" : "") << "><td>"
      << fmt_or_dash(get_num(e, {"epoch"}), 0) << "</td><td>" << fmt_or_dash(get_num(e, {"train_loss"}))
      << "</td><td>" << fmt_or_dash(get_num(e, {"dev", "loss"})) << "</td><td>"
      << fmt_or_dash(get_num(e, {"dev", metric_key.c_str()})) << "</td><td>"
      << html_escape(value_text(e.value("learning_rate", json(nullptr)))) << "</td><td>"
      << fmt_or_dash(get_num(e, {"seconds"}), 2) << "</td><td>"
      << fmt_or_dash(get_num(e, {"tokens_per_second"}), 0) << "</td></tr>\n";
  }
  b << "</table>\n<p class=\"note\">Highlighted: epochs that improved the early-stopping metric.</p>\n";

  // Per-class / per-type scores at the best epoch.
  if (full_dev.contains("classes")) {
    b << "<h2>Dev scores per class (best epoch)</h2>\n<div class=\"cols\"><div>\n"
      << scores_table(full_dev["classes"], "name", "class", true) << "</div><div>\n";
    if (full_dev.contains("confusion")) b << confusion_html(full_dev["confusion"]);
    b << "</div></div>\n";
  } else if (full_dev.contains("labels")) {
    b << "<h2>Dev scores per label (best epoch)</h2>\n"
      << scores_table(full_dev["labels"], "name", "label", true);
  } else if (full_dev.contains("types")) {
    b << "<h2>Dev span scores per type (best epoch)</h2>\n"
      << scores_table(full_dev["types"], "type", "span type", true);
    if (full_dev.contains("micro"))
      b << "<p>All spans pooled: precision " << fmt_or_dash(get_num(full_dev, {"micro", "precision"}))
        << ", recall " << fmt_or_dash(get_num(full_dev, {"micro", "recall"})) << ", F1 "
        << fmt_or_dash(get_num(full_dev, {"micro", "f1"})) << "</p>\n";
  }

  // Settings.
  b << "<h2>Settings</h2>\n<table><tr><th class=\"k\">setting</th><th class=\"k\">value</th></tr>\n";
  for (const auto& [k, v] : config.items())
    b << "<tr><td class=\"k\">" << html_escape(k) << "</td><td class=\"k\">" << html_escape(value_text(v))
      << "</td></tr>\n";
  b << "</table>\n";
  return page(title, b.str());
}

std::string compare_report_html(const fs::path& compare_dir) {
  const fs::path path = compare_dir / "compare.json";
  const json c = read_json_file(path);
  if (!c.is_object() || c.value("format", "") != "gyre-compare" || !c.contains("configs") ||
      !c["configs"].is_array())
    throw FormatError(path.string(), "not a gyre compare summary (format \"gyre-compare\" with \"configs\")");
  const std::string metric = c.value("metric", "score");
  const std::string best = c.contains("best") && c["best"].is_string() ? c["best"].get<std::string>() : "";
  const bool with_test = c.contains("test") && c["test"].is_string();
  const std::string title = "gyre comparison: " + compare_dir.filename().string();
  std::ostringstream b;
  b << "<h1>" << html_escape(title) << "</h1>\n<p class=\"sub\">" << c["configs"].size()
    << " configurations x " << html_escape(value_text(c.value("seeds", json(nullptr))))
    << " seeds, trained on " << html_escape(c.value("train", "?")) << ", scored on "
    << html_escape(c.value("dev", "?"))
    << (with_test ? " and " + html_escape(c["test"].get<std::string>()) : std::string()) << "</p>\n";

  b << "<h2>Configurations</h2>\n<table><tr><th class=\"k\">config</th><th>parameters</th><th>f32 "
       "KiB</th><th>dev "
    << html_escape(metric) << " mean</th><th>&#177; std</th>";
  if (with_test) b << "<th>test " << html_escape(metric) << " mean</th><th>&#177; std</th>";
  b << "<th>train s</th><th>tokens/s</th></tr>\n";
  std::vector<std::string> names;
  std::vector<double> means, errors;
  std::vector<std::vector<double>> points;
  for (const auto& cfg : c["configs"]) {
    const std::string name = cfg.value("name", "?");
    b << "<tr" << (name == best ? " class=\"best\"" : "") << "><td class=\"k\">" << html_escape(name)
      << (name == best ? " &#9733;" : "") << "</td><td>" << fmt_or_dash(get_num(cfg, {"parameters"}), 0)
      << "</td><td>" << fmt_or_dash(get_num(cfg, {"model_bytes"}) / 1024.0, 1) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"dev", "mean"})) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"dev", "std"})) << "</td>";
    if (with_test)
      b << "<td>" << fmt_or_dash(get_num(cfg, {"test", "mean"})) << "</td><td>"
        << fmt_or_dash(get_num(cfg, {"test", "std"})) << "</td>";
    b << "<td>" << fmt_or_dash(get_num(cfg, {"train_seconds", "mean"}), 1) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"tokens_per_second", "mean"}), 0) << "</td></tr>\n";
    names.push_back(name);
    means.push_back(get_num(cfg, {"dev", "mean"}));
    errors.push_back(std::isfinite(get_num(cfg, {"dev", "std"})) ? get_num(cfg, {"dev", "std"}) : 0.0);
    std::vector<double> vals;
    if (cfg.contains("dev") && cfg["dev"].contains("values"))
      for (const auto& v : cfg["dev"]["values"])
        if (v.is_number()) vals.push_back(v.get<double>());
    points.push_back(vals);
  }
  b << "</table>\n<p class=\"note\">Mean and sample standard deviation over seeds; &#9733; = best mean dev "
    << html_escape(metric) << ".</p>\n";
  b << "<h2>Dev " << html_escape(metric) << " per configuration</h2>\n"
    << bar_chart_svg("Dev " + metric + " (bars: mean, whiskers: \u00b1 1 std, dots: seeds)", metric, names,
                     means, errors, points);

  if (c.contains("significance") && c["significance"].is_object()) {
    const auto& s = c["significance"];
    b << "<h2>Is the difference real?</h2>\n<p>" << html_escape(s.value("a", "")) << " vs "
      << html_escape(s.value("b", "")) << ", seed " << html_escape(value_text(s.value("seed", json(nullptr))))
      << " runs, on the " << html_escape(s.value("set", "")) << " set ("
      << html_escape(value_text(s.value("examples", json(nullptr)))) << " examples; exact-match accuracy "
      << fmt_or_dash(get_num(s, {"accuracy_a"})) << " vs " << fmt_or_dash(get_num(s, {"accuracy_b"}))
      << ").</p>\n";
    b << "<table><tr><th class=\"k\">test</th><th class=\"k\">evidence</th><th>p-value</th></tr>\n";
    b << "<tr><td class=\"k\">McNemar exact</td><td class=\"k\">"
      << fmt_or_dash(get_num(s, {"mcnemar_exact", "only_a"}), 0) << " right only by "
      << html_escape(s.value("a", "")) << ", " << fmt_or_dash(get_num(s, {"mcnemar_exact", "only_b"}), 0)
      << " right only by " << html_escape(s.value("b", "")) << "</td><td>"
      << fmt_or_dash(get_num(s, {"mcnemar_exact", "p_value"})) << "</td></tr>\n";
    b << "<tr><td class=\"k\">paired bootstrap</td><td class=\"k\">" << html_escape(s.value("a", ""))
      << " better in " << fmt_or_dash(get_num(s, {"paired_bootstrap", "wins_a"}), 0) << " of "
      << fmt_or_dash(get_num(s, {"paired_bootstrap", "samples"}), 0) << " resamples</td><td>"
      << fmt_or_dash(get_num(s, {"paired_bootstrap", "p_value"})) << "</td></tr>\n</table>\n";
    b << "<p class=\"note\">A small p-value (say below 0.05) means the gap is unlikely to be luck of the "
         "test "
         "examples; it says nothing about seed-to-seed variation, which the table above shows.</p>\n";
  }

  if (c.contains("runs") && c["runs"].is_array()) {
    b << "<h2>Runs</h2>\n<table><tr><th class=\"k\">run</th><th>seed</th><th>epochs</th><th>dev "
      << html_escape(metric) << "</th>"
      << (with_test ? "<th>test " + html_escape(metric) + "</th>" : std::string())
      << "<th>train s</th><th>tokens/s</th></tr>\n";
    for (const auto& r : c["runs"]) {
      b << "<tr><td class=\"k\">" << html_escape(r.value("name", "?"))
        << (r.value("reused", false) ? " (reused)" : "") << "</td><td>"
        << fmt_or_dash(get_num(r, {"seed"}), 0) << "</td><td>" << fmt_or_dash(get_num(r, {"epochs"}), 0)
        << "</td><td>" << fmt_or_dash(get_num(r, {"dev_metric"})) << "</td>";
      if (with_test) b << "<td>" << fmt_or_dash(get_num(r, {"test_metric"})) << "</td>";
      b << "<td>" << fmt_or_dash(get_num(r, {"train_seconds"}), 1) << "</td><td>"
        << fmt_or_dash(get_num(r, {"tokens_per_second"}), 0) << "</td></tr>\n";
    }
    b << "</table>\n";
  }
  if (c.contains("shared_config") && c["shared_config"].is_object()) {
    b << "<h2>Shared settings</h2>\n<table><tr><th class=\"k\">setting</th><th class=\"k\">value</th></tr>\n";
    for (const auto& [k, v] : c["shared_config"].items())
      b << "<tr><td class=\"k\">" << html_escape(k) << "</td><td class=\"k\">" << html_escape(value_text(v))
        << "</td></tr>\n";
    b << "</table>\n";
  }
  return page(title, b.str());
}

fs::path write_report(const fs::path& dir, const fs::path& out) {
  std::error_code ec;
  if (!fs::is_directory(dir, ec)) throw IoError(dir.string() + ": not a directory");
  const bool is_compare = fs::exists(dir / "compare.json", ec);
  if (!is_compare && !fs::exists(dir / "metrics.json", ec))
    throw FormatError(dir.string(),
                      "neither a finished run (metrics.json) nor a compare directory (compare.json)");
  const std::string html = is_compare ? compare_report_html(dir) : run_report_html(dir);
  const fs::path target = out.empty() ? dir / "report.html" : out;
  write_file_atomic(target, html);
  return target;
}

}  // namespace gyre::report
