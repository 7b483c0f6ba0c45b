#include "gyre/train/progress.hpp"

#include <sys/resource.h>
#include <unistd.h>

#include <cmath>

namespace gyre::train {

std::string format_duration(double seconds) {
  char buf[32];
  if (!std::isfinite(seconds) || seconds < 0) return "?";
  if (seconds < 60) {
    std::snprintf(buf, sizeof buf, "%.1fs", seconds);
  } else if (seconds < 3600) {
    const int s = static_cast<int>(seconds);
    std::snprintf(buf, sizeof buf, "%dm%02ds", s / 60, s % 60);
  } else {
    const int m = static_cast<int>(seconds / 60);
    std::snprintf(buf, sizeof buf, "%dh%02dm", m / 60, m % 60);
  }
  return buf;
}

std::size_t peak_rss_bytes() {
  struct rusage usage {};
  if (getrusage(RUSAGE_SELF, &usage) != 0) return 0;
  return static_cast<std::size_t>(usage.ru_maxrss) * 1024;  // Linux reports KiB
}

ProgressLine::ProgressLine(std::FILE* out, int interactive, bool quiet)
    : out_(out),
      interactive_(interactive < 0 ? (isatty(fileno(out)) != 0) : interactive != 0),
      quiet_(quiet) {}

void ProgressLine::start_epoch(int epoch, int epochs, std::size_t steps) {
  epoch_ = epoch;
  epochs_ = epochs;
  steps_ = steps;
  step_ = 0;
  tokens_ = 0;
  loss_ = 0.0;
  epoch_start_ = last_draw_ = std::chrono::steady_clock::now();
}

void ProgressLine::step(std::size_t step, double mean_loss, std::size_t tokens) {
  step_ = step;
  loss_ = mean_loss;
  tokens_ = tokens;
  const auto now = std::chrono::steady_clock::now();
  const double since = std::chrono::duration<double>(now - last_draw_).count();
  if (since >= (interactive_ ? 0.1 : plain_interval)) {
    last_draw_ = now;
    draw(false);
  }
}

void ProgressLine::draw(bool final) {
  if (quiet_) return;
  const double elapsed =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - epoch_start_).count();
  const double tok_per_s = elapsed > 0 ? static_cast<double>(tokens_) / elapsed : 0.0;
  const double eta =
      step_ > 0 ? elapsed * static_cast<double>(steps_ - step_) / static_cast<double>(step_) : NAN;
  char buf[256];
  std::snprintf(buf, sizeof buf, "epoch %d/%d  step %zu/%zu  loss %.4f  %.0f tok/s  %s %s", epoch_, epochs_,
                step_, steps_, loss_, tok_per_s, final ? "took" : "eta",
                format_duration(final ? elapsed : eta).c_str());
  if (interactive_) {
    std::fprintf(out_, "\r\033[K%s", buf);
    line_open_ = true;
  } else {
    std::fprintf(out_, "%s\n", buf);
  }
  std::fflush(out_);
}

void ProgressLine::finish_epoch(const std::string& summary) {
  if (quiet_) return;
  // One short line per epoch: where, how long, how fast, then the scores (the running loss of
  // the step line is the train loss in the summary, so it is not repeated).
  const double elapsed =
      std::chrono::duration<double>(std::chrono::steady_clock::now() - epoch_start_).count();
  const double tok_per_s = elapsed > 0 ? static_cast<double>(tokens_) / elapsed : 0.0;
  std::fprintf(out_, "%sepoch %d/%d  %s  %.0f tok/s  %s\n", interactive_ ? "\r\033[K" : "", epoch_, epochs_,
               format_duration(elapsed).c_str(), tok_per_s, summary.c_str());
  line_open_ = false;
  std::fflush(out_);
}

void ProgressLine::note(const std::string& message) {
  if (quiet_) return;
  if (line_open_) std::fprintf(out_, "\r\033[K");
  std::fprintf(out_, "%s\n", message.c_str());
  if (line_open_) draw(false);
  std::fflush(out_);
}

void ProgressLine::warn(const std::string& message) {
  if (line_open_ && !quiet_) std::fprintf(out_, "\r\033[K");
  std::fprintf(out_, "warning: %s\n", message.c_str());
  if (line_open_ && !quiet_) draw(false);
  std::fflush(out_);
}

}  // namespace gyre::train
