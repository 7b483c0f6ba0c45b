#include "gyre/report/html_report.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <map>
#include <sstream>
#include <tuple>

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

// An x-axis tick label under position x. The last tick sits on the chart's right edge, closer to
// it than half a long label ("0.0025" is ~33 px; kRight is 16): it ends at the tick instead of
// centring on it, so it stays inside the chart.
void x_tick_label(std::ostream& o, double x, const std::string& text, bool last) {
  o << "<text class=\"tick\" x=\"" << num(x, 1) << "\" y=\"" << kHeight - kBottom + 16 << "\" text-anchor=\""
    << (last ? "end" : "middle") << "\">" << text << "</text>\n";
}

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
table{border-collapse:collapse;background:#fff;margin:6px 0 12px;font-variant-numeric:tabular-nums;display:block;max-width:100%;overflow-x:auto}
th,td{border:1px solid #d8dde5;padding:4px 10px;text-align:right}th{background:#eef1f5}
td.k,th.k{text-align:left}tr.best td{font-weight:600;background:#fff7df}
.cm td{min-width:44px;text-align:center}.cm td.zero{color:#9aa3b2}.cm th.corner{background:#fff;font-weight:400;color:#5b6475;font-size:12px}
.charts{display:flex;flex-wrap:wrap;gap:16px}
.chart{background:#fff;border:1px solid #d8dde5}
.chart .title{font-weight:600;font-size:14px}.chart .tick{font-size:11px;fill:#5b6475}
.chart .label{font-size:12px;fill:#1d2330}.chart .grid{stroke:#e6e9ee}.chart .axis{stroke:#7a8394}
.chart polyline{fill:none;stroke-width:2}.chart polyline.front{stroke-width:1.5}.chart .err{stroke:#1d2330;stroke-width:1.5}
.cols{display:flex;flex-wrap:wrap;gap:24px;align-items:flex-start}
.note{color:#5b6475;font-size:13px}
.why span{padding:1px 3px;border-radius:3px;margin:0 1px}
.verdict{font-size:17px;font-weight:600;background:#fff;border-left:4px solid #1f5f99;padding:8px 12px}
.warning{background:#fff4e5;border-left:4px solid #c0562a;padding:6px 12px}
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

// Beyond eval::kDenseConfusionLimit labels the metrics keep only the largest off-diagonal cells.
std::string top_confusions_html(const json& cm) {
  std::ostringstream o;
  o << "<table><tr><th>gold</th><th>predicted</th><th>count</th></tr>\n";
  for (const auto& c : cm["top"])
    o << "<tr><td class=\"k\">" << html_escape(c.value("gold", "")) << "</td><td class=\"k\">"
      << html_escape(c.value("predicted", "")) << "</td><td>" << fmt_or_dash(get_num(c, {"count"}), 0)
      << "</td></tr>\n";
  o << "</table>\n<p class=\"note\">Too many labels for a matrix: the " << cm["top"].size()
    << " most frequent confusions of " << fmt_or_dash(get_num(cm, {"off_diagonal_cells"}), 0) << ".</p>\n";
  return o.str();
}

std::string confusion_html(const json& cm) {
  if (cm.is_object() && cm.contains("top") && cm["top"].is_array()) return top_confusions_html(cm);
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

namespace {

// Axes that hold every finite point and band value (integer ticks on x when the range allows).
Frame band_chart_frame(const std::vector<Series>& series, const std::vector<SeriesStyle>& styles) {
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
  for (std::size_t k = 0; k < styles.size(); ++k) {
    const auto& st = styles[k];
    GYRE_CHECK(st.lo.empty() || (st.lo.size() == series[k].x.size() && st.hi.size() == series[k].x.size()),
               "chart band needs one low and high value per point");
    for (std::size_t i = 0; i < st.lo.size(); ++i) {
      if (!std::isfinite(series[k].x[i]) || !std::isfinite(st.lo[i]) || !std::isfinite(st.hi[i])) continue;
      ylo = std::min(ylo, st.lo[i]);
      yhi = std::max(yhi, st.hi[i]);
    }
  }
  if (!std::isfinite(xlo)) xlo = 0, xhi = 1, ylo = 0, yhi = 1;
  Frame f;
  f.x = nice_axis(xlo, xhi, std::min(8, std::max(1, static_cast<int>(xhi - xlo))));
  if (f.x.step < 1.0 && xhi - xlo >= 1.0) f.x = {std::floor(xlo), std::ceil(xhi), 1.0};
  f.y = nice_axis(ylo, yhi);
  return f;
}

void x_axis(std::ostringstream& o, const Frame& f, std::string_view x_label) {
  const int nx = static_cast<int>(std::lround((f.x.hi - f.x.lo) / f.x.step));
  for (int i = 0; i <= nx; ++i) {
    const double v = f.x.lo + i * f.x.step;
    const double x = f.sx(v);
    o << "<line class=\"axis\" x1=\"" << num(x, 1) << "\" x2=\"" << num(x, 1) << "\" y1=\""
      << kHeight - kBottom << "\" y2=\"" << kHeight - kBottom + 4 << "\"/>";
    x_tick_label(o, x, tick_text(v, f.x.step), i == nx);
  }
  o << "<line class=\"axis\" x1=\"" << kLeft << "\" x2=\"" << kWidth - kRight << "\" y1=\""
    << kHeight - kBottom << "\" y2=\"" << kHeight - kBottom << "\"/>\n";
  o << "<text class=\"label\" x=\"" << (kLeft + kWidth - kRight) / 2 << "\" y=\"" << kHeight - 10
    << "\" text-anchor=\"middle\">" << html_escape(x_label) << "</text>\n";
}

// The shaded low-high bands of the styled series.
void bands(std::ostringstream& o, const Frame& f, const std::vector<Series>& series,
           const std::vector<SeriesStyle>& styles) {
  for (std::size_t k = 0; k < styles.size(); ++k) {
    const auto& st = styles[k];
    const auto& s = series[k];
    if (st.lo.empty()) continue;
    const std::string color = st.color.empty() ? kColors[k % std::size(kColors)] : st.color;
    std::string upper, lower;
    for (std::size_t i = 0; i < s.x.size(); ++i) {
      if (!std::isfinite(s.x[i]) || !std::isfinite(st.lo[i]) || !std::isfinite(st.hi[i])) continue;
      upper += (upper.empty() ? "" : " ") + num(f.sx(s.x[i]), 1) + ',' + num(f.sy(st.hi[i]), 1);
      lower = num(f.sx(s.x[i]), 1) + ',' + num(f.sy(st.lo[i]), 1) + (lower.empty() ? "" : " ") + lower;
    }
    if (!upper.empty())
      o << "<polygon class=\"band\" fill=\"" << color << "\" fill-opacity=\"0.15\" stroke=\"none\" points=\""
        << upper << ' ' << lower << "\"/>\n";
  }
}

// Series k: its line, its points (with a tooltip each) and its legend entry.
void series_line(std::ostringstream& o, const Frame& f, const std::vector<Series>& series,
                 const std::vector<SeriesStyle>& styles, std::size_t k) {
  const auto& s = series[k];
  const std::string color =
      k < styles.size() && !styles[k].color.empty() ? styles[k].color : kColors[k % std::size(kColors)];
  const std::string dash = k < styles.size() ? styles[k].dash : "";
  o << "<polyline class=\"series\" stroke=\"" << color << "\""
    << (dash.empty() ? "" : " stroke-dasharray=\"" + dash + "\"") << " points=\"";
  bool first = true;
  for (std::size_t i = 0; i < s.x.size(); ++i) {
    if (!std::isfinite(s.x[i]) || !std::isfinite(s.y[i])) continue;
    o << (first ? "" : " ") << num(f.sx(s.x[i]), 1) << ',' << num(f.sy(s.y[i]), 1);
    first = false;
  }
  o << "\"/>\n";
  for (std::size_t i = 0; i < s.x.size(); ++i) {
    if (!std::isfinite(s.x[i]) || !std::isfinite(s.y[i])) continue;
    o << "<circle cx=\"" << num(f.sx(s.x[i]), 1) << "\" cy=\"" << num(f.sy(s.y[i]), 1) << "\" r=\"3\" fill=\""
      << color << "\"><title>" << html_escape(s.name) << " @ " << tick_text(s.x[i], 1.0) << ": "
      << num(s.y[i]) << "</title></circle>\n";
  }
  // Legend at the right, one entry per series: at the top for plain charts (falling losses
  // leave it free), at the bottom for styled score curves (rising scores leave that free).
  const double lx = kWidth - kRight - 150;
  const double ly = styles.empty()
                        ? kTop + 4 + 16.0 * static_cast<double>(k)
                        : kHeight - kBottom - 12 - 16.0 * static_cast<double>(series.size() - 1 - k);
  o << "<line x1=\"" << lx << "\" x2=\"" << lx + 14 << "\" y1=\"" << ly + 1.5 << "\" y2=\"" << ly + 1.5
    << "\" stroke=\"" << color << "\" stroke-width=\"2\""
    << (dash.empty() ? "" : " stroke-dasharray=\"" + dash + "\"") << "/>"
    << "<text class=\"tick\" x=\"" << lx + 18 << "\" y=\"" << ly + 5 << "\">" << html_escape(s.name)
    << "</text>\n";
}

}  // namespace

std::string line_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                           const std::vector<Series>& series) {
  return band_chart_svg(title, x_label, y_label, series, {});
}

std::string band_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                           const std::vector<Series>& series, const std::vector<SeriesStyle>& styles) {
  GYRE_CHECK(styles.empty() || styles.size() == series.size(), "chart styles: one per series or none");
  const Frame f = band_chart_frame(series, styles);
  std::ostringstream o;
  svg_open(o, title);
  y_axis(o, f, y_label);
  x_axis(o, f, x_label);
  bands(o, f, series, styles);  // first, so every line is drawn over them
  for (std::size_t k = 0; k < series.size(); ++k) series_line(o, f, series, styles, k);
  o << "</svg>\n";
  return o.str();
}

std::string bar_chart_svg(std::string_view title, std::string_view y_label,
                          const std::vector<std::string>& names, const std::vector<double>& means,
                          const std::vector<double>& errors, const std::vector<std::vector<double>>& points) {
  return bar_chart_svg(title, y_label, names, means, errors, points, {});
}

std::string bar_chart_svg(std::string_view title, std::string_view y_label,
                          const std::vector<std::string>& names, const std::vector<double>& means,
                          const std::vector<double>& errors, const std::vector<std::vector<double>>& points,
                          const std::vector<std::string>& colors) {
  GYRE_CHECK(colors.empty() || colors.size() == names.size(), "bar chart colours: one per bar or none");
  GYRE_CHECK(names.size() == means.size() && means.size() == errors.size() && errors.size() == points.size(),
             "bar chart needs one mean, error and point list per name");
  double lo = INFINITY, hi = -INFINITY;
  for (std::size_t i = 0; i < means.size(); ++i) {
    lo = std::min({lo, means[i] - errors[i]});
    hi = std::max({hi, means[i] + errors[i]});
    for (const double p : points[i]) lo = std::min(lo, p), hi = std::max(hi, p);
  }
  if (!std::isfinite(lo)) lo = 0, hi = 1;
  // Bar lengths must mean something: the axis starts at zero (scores and losses are never
  // negative), so a small gap between configurations looks small.
  Frame f;
  f.y = nice_axis(std::min(0.0, lo), std::max(hi, 1e-6) * 1.05);
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
    const std::string color = colors.empty() ? kColors[i % std::size(kColors)] : colors[i];
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
    x_tick_label(o, cx, html_escape(names[i]), false);  // bars sit inside the chart: centred
  }
  o << "</svg>\n";
  return o.str();
}

std::string front_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                            const std::vector<std::string>& names, const std::vector<double>& x,
                            const std::vector<double>& y, const std::vector<std::string>& colors,
                            const std::vector<bool>& front) {
  GYRE_CHECK(names.size() == x.size() && x.size() == y.size() && y.size() == colors.size() &&
                 colors.size() == front.size(),
             "front chart needs one x, y, colour and flag per name");
  double xlo = INFINITY, xhi = -INFINITY, ylo = INFINITY, yhi = -INFINITY;
  for (std::size_t i = 0; i < x.size(); ++i) {
    if (!std::isfinite(x[i]) || !std::isfinite(y[i])) continue;
    xlo = std::min(xlo, x[i]), xhi = std::max(xhi, x[i]);
    ylo = std::min(ylo, y[i]), yhi = std::max(yhi, y[i]);
  }
  if (!std::isfinite(xlo)) xlo = 0, xhi = 1, ylo = 0, yhi = 1;
  Frame f;
  // Latency from zero, so the spacing of the points shows the ratio of their costs.
  f.x = nice_axis(0.0, xhi * 1.1 + 1e-9);
  const double yspan = std::max(yhi - ylo, 1e-3);
  f.y = nice_axis(ylo - 0.15 * yspan, yhi + 0.15 * yspan);
  std::ostringstream o;
  svg_open(o, title);
  y_axis(o, f, y_label);
  const int nx = static_cast<int>(std::lround((f.x.hi - f.x.lo) / f.x.step));
  for (int i = 0; i <= nx; ++i) {
    const double v = f.x.lo + i * f.x.step;
    x_tick_label(o, f.sx(v), tick_text(v, f.x.step), i == nx);
  }
  o << "<line class=\"axis\" x1=\"" << kLeft << "\" x2=\"" << kWidth - kRight << "\" y1=\""
    << kHeight - kBottom << "\" y2=\"" << kHeight - kBottom << "\"/>\n";
  o << "<text class=\"label\" x=\"" << (kLeft + kWidth - kRight) / 2 << "\" y=\"" << kHeight - 10
    << "\" text-anchor=\"middle\">" << html_escape(x_label) << "</text>\n";
  // The front as a step line through its points, fastest first.
  std::vector<std::size_t> on;
  for (std::size_t i = 0; i < names.size(); ++i)
    if (front[i] && std::isfinite(x[i]) && std::isfinite(y[i])) on.push_back(i);
  std::sort(on.begin(), on.end(), [&](std::size_t a, std::size_t b) { return x[a] < x[b]; });
  if (on.size() >= 2) {
    o << "<polyline class=\"front\" stroke=\"#1d2330\" stroke-dasharray=\"4 3\" points=\"";
    for (std::size_t k = 0; k < on.size(); ++k)
      o << (k ? " " : "") << num(f.sx(x[on[k]]), 1) << ',' << num(f.sy(y[on[k]]), 1);
    o << "\"/>\n";
  }
  const double mid_x = (kLeft + kWidth - kRight) / 2;
  for (std::size_t i = 0; i < names.size(); ++i) {
    if (!std::isfinite(x[i]) || !std::isfinite(y[i])) continue;
    const double px = f.sx(x[i]), py = f.sy(y[i]);
    o << "<circle cx=\"" << num(px, 1) << "\" cy=\"" << num(py, 1) << "\" r=\"" << (front[i] ? 6 : 4)
      << "\" fill=\"" << colors[i] << "\"" << (front[i] ? " stroke=\"#1d2330\" stroke-width=\"1.5\"" : "")
      << "><title>" << html_escape(names[i]) << ": " << num(y[i]) << " at " << num(x[i], 3)
      << " ms</title></circle>";
    // Labels point inwards so none runs off the chart.
    const bool left = px > mid_x;
    o << "<text class=\"tick\" x=\"" << num(px + (left ? -9 : 9), 1) << "\" y=\"" << num(py - 7, 1)
      << "\" text-anchor=\"" << (left ? "end" : "start") << "\">" << html_escape(names[i])
      << (front[i] ? " (front)" : "") << "</text>\n";
  }
  o << "</svg>\n";
  return o.str();
}

namespace {

// log.jsonl: one JSON object per epoch (blank lines allowed).
std::vector<json> read_epoch_log(const fs::path& log_path) {
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
  return epochs;
}

// The run's outcome and sizes, then the best epoch's dev scores, with human labels.
void result_section(std::ostringstream& b, const json& metrics) {
  b << "<h2>Result</h2>\n<table>\n";
  auto row = [&](const std::string& k, const std::string& v) {
    b << "<tr><td class=\"k\">" << html_escape(k) << "</td><td>" << html_escape(v) << "</td></tr>\n";
  };
  // Human labels, and numbers rounded to what they can tell: scores to 4 decimals, times to a
  // tenth of a second, rates to whole tokens.
  auto fixed = [](const json& v, int decimals) {
    if (!v.is_number()) return value_text(v);
    char buf[64];
    std::snprintf(buf, sizeof buf, "%.*f", decimals, v.get<double>());
    return std::string(buf);
  };
  struct Field {
    const char* key;
    const char* label;
    int decimals;  // -1: as it is (text, integers)
  };
  for (const Field& f : {Field{"outcome", "outcome", -1},
                         {"epochs", "epochs trained", -1},
                         {"best_epoch", "best epoch", -1},
                         {"metric", "best epoch chosen by dev", -1},
                         {"best_metric", "best dev score", 4},
                         {"train_examples", "training examples", -1},
                         {"dev_examples", "dev examples", -1},
                         {"vocabulary_size", "vocabulary size", -1},
                         {"parameters", "parameters", -1},
                         {"seconds", "training time (s)", 1},
                         {"tokens_per_second", "tokens per second", 0},
                         {"threads", "threads", -1}})
    if (metrics.contains(f.key)) {
      std::string text = f.decimals < 0 ? value_text(metrics[f.key]) : fixed(metrics[f.key], f.decimals);
      if (std::string(f.key) == "metric") {
        for (char& c : text) c = c == '_' ? ' ' : c;  // "macro_f1" -> "macro f1"
      }
      row(f.label, text);
    }
  if (metrics.contains("dev") && metrics["dev"].is_object()) {
    // Scalars as they are; averages ({"precision", "recall", "f1"}) by their F1; lists are shown
    // in their own tables below. "log_loss" (the metric, clipped) is left out when the training
    // objective's "loss" is there: one dev loss.
    const json& dev = metrics["dev"];
    auto label = [](const std::string& k) {
      static const std::map<std::string, std::string> names = {{"accuracy", "accuracy"},
                                                               {"macro", "macro"},
                                                               {"micro", "micro"},
                                                               {"weighted", "weighted"},
                                                               {"loss", "loss"},
                                                               {"log_loss", "log loss"},
                                                               {"ece", "calibration error (ECE)"},
                                                               {"span_f1", "span F1"},
                                                               {"token_accuracy", "token accuracy"},
                                                               {"macro_f1", "macro F1"},
                                                               {"hamming_loss", "Hamming loss"},
                                                               {"subset_accuracy", "exact-match accuracy"}};
      const auto it = names.find(k);
      if (it != names.end()) return it->second;
      std::string text = k;
      for (char& c : text) c = c == '_' ? ' ' : c;
      return text;
    };
    for (const auto& [k, v] : dev.items()) {
      if (k == "task" || k == "examples" || k == "correct") continue;
      if (k == "log_loss" && dev.contains("loss")) continue;
      if (v.is_number())
        row("dev " + label(k) + " (best epoch)", fixed(v, 4));
      else if (v.is_object() && v.contains("f1") && v["f1"].is_number())
        row("dev " + label(k) + " F1 (best epoch)", fixed(v["f1"], 4));
      else if (v.is_object() && v.contains("error") && v["error"].is_number())
        row("dev " + label(k) + " error (best epoch)", fixed(v["error"], 4));
    }
  }
  b << "</table>\n";
}

void curves_section(std::ostringstream& b, const std::vector<json>& epochs, bool tagging) {
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
}

void epochs_section(std::ostringstream& b, const std::vector<json>& epochs, bool tagging) {
  const std::string metric_key = tagging ? "span_f1" : "accuracy";
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
}

// Per-class / per-label / per-span-type scores at the best epoch.
void best_epoch_scores_section(std::ostringstream& b, const json& full_dev) {
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
}

// Calibration (metrics.json "calibration", written by the trainer's temperature fit on dev).
void calibration_section(std::ostringstream& b, const json& metrics) {
  if (metrics.contains("calibration") && metrics["calibration"].is_object() &&
      metrics["calibration"].contains("before") && metrics["calibration"].contains("after")) {
    const json& cal = metrics["calibration"];
    Series diagonal{"perfect calibration", {0.0, 1.0}, {0.0, 1.0}};
    Series before{"before: ECE " + fmt_or_dash(get_num(cal, {"before", "error"})), {}, {}};
    Series after{"after: ECE " + fmt_or_dash(get_num(cal, {"after", "error"})), {}, {}};
    for (auto [series, key] : {std::pair{&before, "before"}, std::pair{&after, "after"}})
      for (const auto& bin : cal[key].value("bins", json::array()))
        if (bin.value("count", 0) > 0) {
          series->x.push_back(bin.value("confidence", 0.0));
          series->y.push_back(bin.value("accuracy", 0.0));
        }
    std::string temps;
    for (const auto& t : cal.value("temperature", json::array()))
      temps += (temps.empty() ? "" : ", ") + fmt_or_dash(t.get<double>(), 3);
    b << "<h2>Calibration</h2>\n<p>Temperature scaling (Guo et al. 2017) fitted on dev: T = "
      << html_escape(temps) << ". Each point is one confidence bin (of 15) of the "
      << fmt_or_dash(get_num(cal, {"after", "predictions"}), 0)
      << " dev predictions: mean confidence against accuracy; points on the diagonal are calibrated.</p>\n"
      << "<div class=\"charts\">\n"
      << line_chart_svg("Reliability diagram (dev)", "confidence", "accuracy", {diagonal, before, after})
      << "</div>\n";
  }
}

// Per-label decision thresholds of a multi-label run (metrics.json "label_thresholds").
void label_thresholds_section(std::ostringstream& b, const json& metrics) {
  if (!metrics.contains("label_thresholds") || !metrics["label_thresholds"].is_object()) return;
  const json& lt = metrics["label_thresholds"];
  const double global = get_num(lt, {"global"});
  b << "<h2>Label thresholds</h2>\n<p>Each label is chosen when its probability reaches its threshold, "
       "the one with the label's best F1 on dev (ties keep the global "
    << fmt_or_dash(global, 2)
    << "). Dev scores after tuning are measured on the rows the thresholds were chosen on.</p>\n"
       "<table><tr><th class=\"k\">label</th><th>threshold</th></tr>\n";
  const json thresholds = lt.value("thresholds", json::object());  // items() must not outlive it
  for (const auto& [label, t] : thresholds.items())
    b << "<tr><td class=\"k\">" << html_escape(label) << "</td><td>"
      << fmt_or_dash(t.is_number() ? t.get<double>() : std::nan(""), 3) << "</td></tr>\n";
  b << "<tr><td class=\"k\">dev macro F1</td><td>" << fmt_or_dash(get_num(lt, {"dev_macro_f1_before"}))
    << " &rarr; " << fmt_or_dash(get_num(lt, {"dev_macro_f1_after"})) << "</td></tr>\n"
    << "<tr><td class=\"k\">dev micro F1</td><td>" << fmt_or_dash(get_num(lt, {"dev_micro_f1_before"}))
    << " &rarr; " << fmt_or_dash(get_num(lt, {"dev_micro_f1_after"})) << "</td></tr>\n</table>\n";
}

// The tokens of a "why" object, each shaded by its `field` relative to the strongest one: green
// towards the label, red away from it; the value is the tooltip.
std::string shaded_tokens(const json& why, const char* field) {
  double most = 0.0;
  for (const auto& t : why.value("tokens", json::array()))
    most = std::max(most, std::abs(t.value(field, 0.0)));
  std::string text;
  for (const auto& t : why.value("tokens", json::array())) {
    const double v = t.value(field, 0.0);
    const double share = most > 0 ? std::abs(v) / most : 0.0;
    char style[96];
    std::snprintf(style, sizeof style, "background:rgba(%s,%.2f)", v >= 0 ? "46,125,50" : "198,40,40", share);
    text += "<span style=\"" + std::string(style) + "\" title=\"" + num(v) + "\">" +
            html_escape(t.value("token", "")) + "</span> ";
  }
  return text;
}

// Confident dev mistakes with per-token attributions (metrics.json "dev_mistakes"); a model with
// an n-gram part also gets the part's share of each token (a second shaded line).
void dev_mistakes_section(std::ostringstream& b, const json& metrics) {
  if (metrics.contains("dev_mistakes") && metrics["dev_mistakes"].is_array() &&
      !metrics["dev_mistakes"].empty()) {
    b << "<h2>Why these dev mistakes</h2>\n<p>The most confident wrong answers on dev. Each token is shaded "
         "by its "
         "share of the predicted label's probability (integrated gradients, Sundararajan et al. 2017): "
         "<span style=\"background:#2e7d32;color:#fff;padding:0 4px\">green</span> pushed towards the "
         "wrong label, <span style=\"background:#c62828;color:#fff;padding:0 4px\">red</span> away from it. "
         "The gap is the completeness check: |sum of shares - (p(text) - p(empty embeddings))|. A model "
         "with an n-gram part shows the part's exact share of the label's logit on a second line (each "
         "n-gram's term split equally over its tokens; the network's shares hold the part fixed).</p>\n"
      << "<table><tr><th>line</th><th class=\"k\">gold</th><th class=\"k\">predicted</th><th>p</th>"
         "<th class=\"k\">text</th><th>gap</th></tr>\n";
    for (const auto& e : metrics["dev_mistakes"]) {
      const json& why = e.contains("why") ? e["why"] : json::object();
      std::string text = shaded_tokens(why, "score");
      if (why.contains("ngram_part") && why["ngram_part"].is_object())
        text += "<br>n-gram part (logit " + fmt_or_dash(get_num(why, {"ngram_part", "logit"}), 3) +
                ", bias " + fmt_or_dash(get_num(why, {"ngram_part", "bias"}), 3) +
                "): " + shaded_tokens(why, "ngram_part");
      b << "<tr><td>" << html_escape(value_text(e.value("line", json(nullptr)))) << "</td><td class=\"k\">"
        << html_escape(e.value("gold", "")) << "</td><td class=\"k\">"
        << html_escape(e.value("predicted", "")) << "</td><td>" << fmt_or_dash(e.value("probability", NAN), 3)
        << "</td><td class=\"k why\">" << text << "</td><td>"
        << fmt_or_dash(get_num(why, {"completeness", "gap"}), 5) << "</td></tr>\n";
    }
    b << "</table>\n";
  }
}

void settings_section(std::ostringstream& b, const json& config, const char* heading = "Settings") {
  b << "<h2>" << heading << "</h2>\n<table><tr><th class=\"k\">setting</th><th class=\"k\">value</th></tr>\n";
  for (const auto& [k, v] : config.items())
    b << "<tr><td class=\"k\">" << html_escape(k) << "</td><td class=\"k\">" << html_escape(value_text(v))
      << "</td></tr>\n";
  b << "</table>\n";
}

}  // namespace

std::string run_report_html(const fs::path& run_dir) {
  const json config = read_json_file(run_dir / "config.json");
  const json metrics = read_json_file(run_dir / "metrics.json");
  json full_dev = json::object();
  std::error_code ec;
  if (fs::exists(run_dir / "best-dev-metrics.json", ec))
    full_dev = read_json_file(run_dir / "best-dev-metrics.json");
  else if (metrics.contains("dev") && metrics["dev"].is_object())
    full_dev = metrics["dev"];
  const std::vector<json> epochs = read_epoch_log(run_dir / "log.jsonl");

  const bool tagging =
      full_dev.value("task", "") == "tagging" ||
      (metrics.contains("dev") && metrics["dev"].is_object() && metrics["dev"].contains("span_f1"));
  const std::string title = "gyre run: " + run_dir.filename().string();
  std::ostringstream b;
  b << "<h1>" << html_escape(title) << "</h1>\n<p class=\"sub\">" << html_escape(config.value("cell", "?"))
    << ", hidden " << html_escape(value_text(config.value("hidden_size", json(nullptr)))) << ", trained on "
    << html_escape(config.value("train", "?")) << "</p>\n";
  result_section(b, metrics);
  curves_section(b, epochs, tagging);
  epochs_section(b, epochs, tagging);
  best_epoch_scores_section(b, full_dev);
  calibration_section(b, metrics);
  label_thresholds_section(b, metrics);
  dev_mistakes_section(b, metrics);
  settings_section(b, config);
  return page(title, b.str());
}

namespace {

// One hue per cell type; hidden sizes of a cell differ by dash pattern in the curves.
std::string cell_color(const std::string& cell) {
  return cell == "lstm" ? kColors[0] : cell == "gru" ? kColors[1] : kColors[2];
}
const char* const kDashes[] = {"", "7 4", "2 3", "9 3 2 3"};

// The title line, what was compared on what, and the verdict with its warnings.
void compare_heading(std::ostringstream& b, const json& c, const std::string& title, bool with_test) {
  b << "<h1>" << html_escape(title) << "</h1>\n<p class=\"sub\">" << c["configs"].size()
    << " configurations x " << html_escape(value_text(c.value("seeds", json(nullptr))))
    << " seeds, trained on " << html_escape(c.value("train", "?")) << ", scored on "
    << html_escape(c.value("dev", "?"))
    << (with_test ? " and " + html_escape(c["test"].get<std::string>()) : std::string()) << "</p>\n";
  if (c.contains("head_to_head") && c["head_to_head"].is_object()) {
    const auto& h = c["head_to_head"];
    b << "<p class=\"verdict\">" << html_escape(h.value("verdict", "")) << "</p>\n";
    if (h.contains("notes") && h["notes"].is_array())
      for (const auto& n : h["notes"])
        if (n.is_string()) b << "<p class=\"warning\">" << html_escape(n.get<std::string>()) << "</p>\n";
  }
}

// What the charts show per configuration, in table order.
struct ConfigSeries {
  std::vector<std::string> names, colors;
  std::vector<double> means, errors, latency, accuracy;
  std::vector<bool> front;
  std::vector<std::vector<double>> points;
  std::map<std::string, int> size_rank;  // per cell: 0, 1, 2 ... in order of appearance
};

// The table of configurations; returns what the charts need of them.
ConfigSeries configurations_section(std::ostringstream& b, const json& c, const std::string& metric,
                                    const std::string& best, bool with_test) {
  ConfigSeries s;
  std::map<std::string, int> per_cell;
  b << "<h2>Configurations</h2>\n<table><tr><th class=\"k\">config</th><th>parameters</th><th>int8 "
       "KiB</th><th>ms/text</th><th>dev "
    << html_escape(metric) << " mean</th><th>&#177; std</th>";
  if (with_test) b << "<th>test " << html_escape(metric) << " mean</th><th>&#177; std</th>";
  b << "<th>train s</th><th>tokens/s</th><th class=\"k\">front</th></tr>\n";
  for (const auto& cfg : c["configs"]) {
    const std::string name = cfg.value("name", "?");
    const std::string cell = cfg.value("cell", "");
    if (!s.size_rank.count(name)) s.size_rank[name] = per_cell[cell]++;
    b << "<tr" << (name == best ? " class=\"best\"" : "") << "><td class=\"k\">" << html_escape(name)
      << (name == best ? " &#9733;" : "") << "</td><td>" << fmt_or_dash(get_num(cfg, {"parameters"}), 0)
      << "</td><td>" << fmt_or_dash(get_num(cfg, {"int8_bytes"}) / 1024.0, 1) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"latency_ms"}), 3) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"dev", "mean"})) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"dev", "std"})) << "</td>";
    if (with_test)
      b << "<td>" << fmt_or_dash(get_num(cfg, {"test", "mean"})) << "</td><td>"
        << fmt_or_dash(get_num(cfg, {"test", "std"})) << "</td>";
    const bool on_front = cfg.value("pareto", false);
    b << "<td>" << fmt_or_dash(get_num(cfg, {"train_seconds", "mean"}), 1) << "</td><td>"
      << fmt_or_dash(get_num(cfg, {"tokens_per_second", "mean"}), 0) << "</td><td class=\"k\">"
      << (on_front ? "&#9670; front" : "") << "</td></tr>\n";
    s.names.push_back(name);
    s.colors.push_back(cell_color(cell));
    s.means.push_back(get_num(cfg, {"dev", "mean"}));
    s.errors.push_back(std::isfinite(get_num(cfg, {"dev", "std"})) ? get_num(cfg, {"dev", "std"}) : 0.0);
    s.latency.push_back(get_num(cfg, {"latency_ms"}));
    s.accuracy.push_back(with_test ? get_num(cfg, {"test", "mean"}) : get_num(cfg, {"dev", "mean"}));
    s.front.push_back(on_front);
    std::vector<double> vals;
    if (cfg.contains("dev") && cfg["dev"].contains("values"))
      for (const auto& v : cfg["dev"]["values"])
        if (v.is_number()) vals.push_back(v.get<double>());
    s.points.push_back(vals);
  }
  b << "</table>\n<p class=\"note\">Mean and sample standard deviation over seeds; &#9733; = best mean dev "
    << html_escape(metric)
    << ". int8 KiB: the exported int8 model file; ms/text: its median batch-1 latency in the embedded "
       "runtime "
       "on the machine that ran the comparison; &#9670; front: no other configuration is both as accurate ("
    << (with_test ? "test" : "dev") << ") and as fast.</p>\n";
  return s;
}

// Dev curves: mean over seeds per epoch, band from the lowest to the highest seed; one series per
// configuration (none without runs).
void dev_curves(const json& c, const ConfigSeries& s, std::vector<Series>& curves,
                std::vector<SeriesStyle>& styles) {
  if (!c.contains("runs") || !c["runs"].is_array()) return;
  for (const auto& cfg : c["configs"]) {
    const std::string name = cfg.value("name", "?");
    std::vector<std::vector<double>> by_epoch;
    for (const auto& r : c["runs"]) {
      if (r.value("config", "") != name || !r.contains("dev_curve") || !r["dev_curve"].is_array()) continue;
      for (std::size_t e = 0; e < r["dev_curve"].size(); ++e) {
        if (by_epoch.size() <= e) by_epoch.resize(e + 1);
        if (r["dev_curve"][e].is_number()) by_epoch[e].push_back(r["dev_curve"][e].get<double>());
      }
    }
    Series line;
    line.name = name;
    SeriesStyle st;
    st.color = cell_color(cfg.value("cell", ""));
    st.dash = kDashes[static_cast<std::size_t>(s.size_rank.at(name)) % std::size(kDashes)];
    for (std::size_t e = 0; e < by_epoch.size(); ++e) {
      if (by_epoch[e].empty()) continue;
      double sum = 0.0;
      for (const double v : by_epoch[e]) sum += v;
      line.x.push_back(static_cast<double>(e + 1));
      line.y.push_back(sum / static_cast<double>(by_epoch[e].size()));
      st.lo.push_back(*std::min_element(by_epoch[e].begin(), by_epoch[e].end()));
      st.hi.push_back(*std::max_element(by_epoch[e].begin(), by_epoch[e].end()));
    }
    curves.push_back(std::move(line));
    styles.push_back(std::move(st));
  }
}

void compare_charts_section(std::ostringstream& b, const json& c, const std::string& metric, bool with_test,
                            const ConfigSeries& s) {
  std::vector<Series> curves;
  std::vector<SeriesStyle> styles;
  dev_curves(c, s, curves, styles);
  b << "<h2>Dev " << html_escape(metric) << " per configuration</h2>\n<div class=\"charts\">\n"
    << bar_chart_svg("Dev " + metric + " (bar: mean, whiskers: \u00b1 1 std, dots: seeds)", metric, s.names,
                     s.means, s.errors, s.points, s.colors);
  if (!curves.empty())
    b << band_chart_svg("Dev " + metric + " per epoch (line: mean, band: seed range)", "epoch", metric,
                        curves, styles);
  b << "</div>\n";
  b << "<h2>Accuracy and latency</h2>\n<div class=\"charts\">\n"
    << front_chart_svg(std::string(with_test ? "Test " : "Dev ") + metric + " vs batch-1 latency",
                       "ms per text (int8, embedded runtime)", metric, s.names, s.latency, s.accuracy,
                       s.colors, s.front)
    << "</div>\n<p class=\"note\">Blue: LSTM, orange: GRU.</p>\n";
}

// The head-to-head object of compare.json `h`: per-seed scores, then each test's result.
void head_to_head_section(std::ostringstream& b, const json& h) {
  const bool pts = h.value("points", true);
  const double scale = pts ? 100.0 : 1.0;
  const int dec = pts ? 1 : 4;
  const std::string la = h.value("label_a", ""), lb = h.value("label_b", "");
  b << "<h2>Head-to-head: " << html_escape(la) << " vs " << html_escape(lb) << "</h2>\n";
  b << "<table><tr><th class=\"k\">config</th><th class=\"k\">" << html_escape(h.value("set", "")) << " "
    << html_escape(h.value("metric", "")) << " per seed" << (pts ? " (points)" : "")
    << "</th><th>mean</th><th>&#177; std</th></tr>\n";
  for (const auto& [label, key, mean, sd] :
       {std::tuple{la, "scores_a", "mean_a", "std_a"}, std::tuple{lb, "scores_b", "mean_b", "std_b"}}) {
    std::string seeds;
    if (h.contains(key))
      for (const auto& v : h[key])
        if (v.is_number()) seeds += (seeds.empty() ? "" : " ") + num(scale * v.get<double>(), dec);
    b << "<tr><td class=\"k\">" << html_escape(label) << "</td><td class=\"k\">" << seeds << "</td><td>"
      << fmt_or_dash(scale * get_num(h, {mean}), dec) << "</td><td>"
      << fmt_or_dash(scale * get_num(h, {sd}), dec) << "</td></tr>\n";
  }
  b << "</table>\n<table><tr><th class=\"k\">method</th><th class=\"k\">result</th></tr>\n";
  b << "<tr><td class=\"k\">two-level bootstrap (runs, then examples shared by all runs), "
    << fmt_or_dash(get_num(h, {"two_level_bootstrap", "samples"}), 0) << " resamples</td><td class=\"k\">"
    << "difference " << fmt_or_dash(scale * get_num(h, {"difference"}), dec) << ", 95% interval "
    << fmt_or_dash(scale * get_num(h, {"two_level_bootstrap", "low"}), dec) << " to "
    << fmt_or_dash(scale * get_num(h, {"two_level_bootstrap", "high"}), dec) << "</td></tr>\n";
  b << "<tr><td class=\"k\">permutation test over the per-seed scores</td><td class=\"k\">p = "
    << fmt_or_dash(get_num(h, {"permutation_test", "p_value"})) << "</td></tr>\n";
  if (h.contains("per_seed_mcnemar") && h["per_seed_mcnemar"].is_array())
    for (const auto& m : h["per_seed_mcnemar"])
      b << "<tr><td class=\"k\">McNemar exact, seed "
        << html_escape(value_text(m.value("seed", json(nullptr)))) << "</td><td class=\"k\">"
        << fmt_or_dash(get_num(m, {"only_a"}), 0) << " right only by " << html_escape(la) << ", "
        << fmt_or_dash(get_num(m, {"only_b"}), 0) << " only by " << html_escape(lb)
        << "; p = " << fmt_or_dash(get_num(m, {"p_value"})) << "</td></tr>\n";
  b << "</table>\n<p class=\"note\">The interval counts both sources of chance: which seeds were drawn and "
       "which test examples. Per-seed McNemar tests look at examples only.</p>\n";
}

void compare_runs_section(std::ostringstream& b, const json& runs, const std::string& metric,
                          bool with_test) {
  b << "<h2>Runs</h2>\n<table><tr><th class=\"k\">run</th><th>seed</th><th>epochs</th><th>dev "
    << html_escape(metric) << "</th>"
    << (with_test ? "<th>test " + html_escape(metric) + "</th>" : std::string())
    << "<th>train s</th><th>tokens/s</th></tr>\n";
  for (const auto& r : runs) {
    b << "<tr><td class=\"k\">" << html_escape(r.value("name", "?"))
      << (r.value("reused", false) ? " (reused)" : "") << "</td><td>" << fmt_or_dash(get_num(r, {"seed"}), 0)
      << "</td><td>" << fmt_or_dash(get_num(r, {"epochs"}), 0) << "</td><td>"
      << fmt_or_dash(get_num(r, {"dev_metric"})) << "</td>";
    if (with_test) b << "<td>" << fmt_or_dash(get_num(r, {"test_metric"})) << "</td>";
    b << "<td>" << fmt_or_dash(get_num(r, {"train_seconds"}), 1) << "</td><td>"
      << fmt_or_dash(get_num(r, {"tokens_per_second"}), 0) << "</td></tr>\n";
  }
  b << "</table>\n";
}

}  // namespace

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
  compare_heading(b, c, title, with_test);
  const ConfigSeries series = configurations_section(b, c, metric, best, with_test);
  compare_charts_section(b, c, metric, with_test, series);
  if (c.contains("head_to_head") && c["head_to_head"].is_object()) head_to_head_section(b, c["head_to_head"]);
  if (c.contains("runs") && c["runs"].is_array()) compare_runs_section(b, c["runs"], metric, with_test);
  if (c.contains("shared_config") && c["shared_config"].is_object())
    settings_section(b, c["shared_config"], "Shared settings");
  return page(title, b.str());
}

std::string labelling_report_html(const fs::path& trial_dir) {
  const json t = read_json_file(trial_dir / "labelling.json");
  const std::string title = "gyre labelling trial: " + trial_dir.filename().string();
  std::vector<Series> series;
  for (const auto& rule : t.value("rules", json::array())) {
    Series s{rule.value("rule", "?"), {}, {}};
    for (const auto& p : rule.value("points", json::array())) {
      s.x.push_back(get_num(p, {"labelled"}));
      s.y.push_back(get_num(p, {"accuracy"}));
    }
    series.push_back(std::move(s));
  }
  std::ostringstream b;
  b << "<h1>" << html_escape(title) << "</h1>\n<p class=\"sub\">pool " << html_escape(t.value("train", "?"))
    << " (" << html_escape(value_text(t.value("examples", json(nullptr)))) << " examples), test "
    << html_escape(t.value("test", "?")) << "</p>\n"
    << "<p>Each rule starts from the same random " << html_escape(value_text(t.value("start", json(nullptr))))
    << " labelled examples and adds " << html_escape(value_text(t.value("step", json(nullptr))))
    << " per round: <b>random</b> at random, <b>uncertain</b> the smallest margins (uncertainty by "
    << html_escape(t.value("measure", "?"))
    << "), <b>diverse</b> greedy k-center (Sener &amp; Savarese 2018) over the model's representation among "
       "the most uncertain. The model is retrained from scratch each round.</p>\n"
    << "<div class=\"charts\">\n"
    << line_chart_svg("Test accuracy by labelled examples", "labelled examples", "accuracy", series)
    << "</div>\n<table><tr><th class=\"k\">rule</th>";
  if (!series.empty())
    for (const double x : series[0].x) b << "<th>" << fmt_or_dash(x, 0) << "</th>";
  b << "</tr>\n";
  for (const auto& s : series) {
    b << "<tr><td class=\"k\">" << html_escape(s.name) << "</td>";
    for (const double y : s.y) b << "<td>" << fmt_or_dash(y) << "</td>";
    b << "</tr>\n";
  }
  b << "</table>\n";
  return page(title, b.str());
}

fs::path write_report(const fs::path& dir, const fs::path& out) {
  std::error_code ec;
  if (!fs::is_directory(dir, ec)) throw IoError(dir.string() + ": not a directory");
  const bool is_compare = fs::exists(dir / "compare.json", ec);
  const bool is_trial = !is_compare && fs::exists(dir / "labelling.json", ec);
  if (!is_compare && !is_trial && !fs::exists(dir / "metrics.json", ec))
    throw FormatError(dir.string(),
                      "neither a finished run (metrics.json), a compare directory (compare.json) nor a "
                      "labelling trial (labelling.json)");
  const std::string html = is_compare ? compare_report_html(dir)
                           : is_trial ? labelling_report_html(dir)
                                      : run_report_html(dir);
  const fs::path target = out.empty() ? dir / "report.html" : out;
  write_file_atomic(target, html);
  return target;
}

}  // namespace gyre::report
