#pragma once
// Progress reporting for long work. On a terminal, one line per epoch is redrawn in place on
// stderr; otherwise (logs, CI) a plain line is printed every few seconds so a log file shows
// steady progress without thousands of carriage returns.

#include <chrono>
#include <cstddef>
#include <cstdio>
#include <string>

namespace gyre::train {

class ProgressLine {
 public:
  /// out: where to draw (stderr by default). interactive: redraw in place; by default true when
  /// out is a terminal. quiet: print nothing.
  explicit ProgressLine(std::FILE* out = stderr, int interactive = -1, bool quiet = false);

  void start_epoch(int epoch, int epochs, std::size_t steps);
  /// Called after every step; prints at most ~10 times a second on a terminal, every
  /// `plain_interval` seconds otherwise.
  void step(std::size_t step, double mean_loss, std::size_t tokens);
  /// Ends the epoch's line with a summary (keeps it on screen).
  void finish_epoch(const std::string& summary);
  /// A message on its own line (does not break the redrawn line); quiet hides it.
  void note(const std::string& message);
  /// "warning: " + message on its own line, printed even when quiet: warnings are about the
  /// data or the result, not progress.
  void warn(const std::string& message);

  double plain_interval = 5.0;

 private:
  void draw(bool final);
  std::FILE* out_;
  bool interactive_;
  bool quiet_;
  int epoch_ = 0, epochs_ = 0;
  std::size_t steps_ = 0, step_ = 0, tokens_ = 0;
  double loss_ = 0.0;
  bool line_open_ = false;
  std::chrono::steady_clock::time_point epoch_start_, last_draw_;
};

/// Formats seconds as "1h02m", "3m05s" or "12.3s".
std::string format_duration(double seconds);

/// Peak resident set size of this process in bytes (getrusage), 0 if unknown.
std::size_t peak_rss_bytes();

}  // namespace gyre::train
