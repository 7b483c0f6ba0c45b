// gyre report: one self-contained HTML page for a run, compare or labelling-trial directory.

#include <cstdio>
#include <memory>

#include "cli/command.hpp"
#include "gyre/report/html_report.hpp"

namespace gyre::cli {
namespace {

struct ReportOptions {
  std::string dir, out;
};

const RegisterCommand kRegister{
    "report",
    "Write a self-contained HTML report (inline SVG charts) of a run, a comparison or a labelling trial", 65,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<ReportOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre report runs/intents-lstm                  # writes runs/intents-lstm/report.html\n"
          "  gyre report runs/intents-compare --out cmp.html\n"
          "A run directory gives settings, loss and dev-score curves per epoch, per-class scores and the\n"
          "confusion matrix (classifiers) or per-type span scores (taggers), the reliability diagram of the\n"
          "temperature fitted on dev and the most confident dev mistakes with shaded tokens. A directory "
          "made\n"
          "by `gyre compare` gives the comparison table, a chart with error bars and the significance "
          "tests;\n"
          "one made by `gyre pick-trial`, test accuracy against labelled examples per rule.\n"
          "The page needs no network and no scripts; it is written atomically.");
      sub.add_option("dir", o->dir, "run, compare or pick-trial directory")->required();
      sub.add_option("--out", o->out, "HTML file to write (default: DIR/report.html)");
      return [o] {
        const auto path = report::write_report(o->dir, o->out);
        std::printf("%s\n", path.string().c_str());
        return ExitCode::kOk;
      };
    }};

}  // namespace
}  // namespace gyre::cli
