#pragma once
// `gyre report`: one self-contained HTML page (inline CSS and SVG, no scripts, no external
// resources) describing a training run directory or a `gyre compare` directory.

#include <filesystem>
#include <string>
#include <string_view>
#include <vector>

namespace gyre::report {

/// Escapes & < > " ' for HTML text and attribute values.
std::string html_escape(std::string_view text);

/// One line of a chart: y[i] at x[i]; both the same length.
struct Series {
  std::string name;
  std::vector<double> x, y;
};

/// An SVG line chart with axes, "nice" ticks (1/2/5 x 10^k), axis labels and a legend; one
/// <polyline> per series and one <circle> per point. Non-finite points are left out.
std::string line_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                           const std::vector<Series>& series);

/// How one series of band_chart_svg is drawn: a shaded band from lo[i] to hi[i] around the line
/// (none when empty; otherwise one value per point), a colour (default: the palette) and an SVG
/// stroke-dasharray ("" = solid).
struct SeriesStyle {
  std::vector<double> lo, hi;
  std::string color;
  std::string dash;
};
/// line_chart_svg with a style per series (styles empty, or one per series). Bands are drawn
/// under the lines as one <polygon class="band"> each.
std::string band_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                           const std::vector<Series>& series, const std::vector<SeriesStyle>& styles);

/// Configurations as points (x = cost, y = score) in their colours; the ones flagged `front`
/// are ringed, labelled "(front)" and joined by a dashed line. The x axis starts at zero.
std::string front_chart_svg(std::string_view title, std::string_view x_label, std::string_view y_label,
                            const std::vector<std::string>& names, const std::vector<double>& x,
                            const std::vector<double>& y, const std::vector<std::string>& colors,
                            const std::vector<bool>& front);

/// One bar per category with an error bar of +- error[i] (skipped when 0) and the individual
/// values as dots. All vectors the same length (points[i] may be empty).
std::string bar_chart_svg(std::string_view title, std::string_view y_label,
                          const std::vector<std::string>& names, const std::vector<double>& means,
                          const std::vector<double>& errors, const std::vector<std::vector<double>>& points);
/// The same with one colour per bar (empty: the palette). The y axis starts at zero.
std::string bar_chart_svg(std::string_view title, std::string_view y_label,
                          const std::vector<std::string>& names, const std::vector<double>& means,
                          const std::vector<double>& errors, const std::vector<std::vector<double>>& points,
                          const std::vector<std::string>& colors);

/// The page for a run directory (config.json, log.jsonl, metrics.json, best-dev-metrics.json).
/// Throws IoError/ParseError naming the file when one is missing or malformed.
std::string run_report_html(const std::filesystem::path& run_dir);

/// The page for a compare directory (compare.json).
std::string compare_report_html(const std::filesystem::path& compare_dir);

/// The page for a labelling trial directory (labelling.json of `gyre pick-trial`).
std::string labelling_report_html(const std::filesystem::path& trial_dir);

/// Writes the report of `dir` (a compare directory when it holds compare.json, else a run
/// directory) atomically to `out` (default: dir/report.html); returns the path written.
std::filesystem::path write_report(const std::filesystem::path& dir, const std::filesystem::path& out = {});

}  // namespace gyre::report
