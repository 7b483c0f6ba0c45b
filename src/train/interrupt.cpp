#include "gyre/train/interrupt.hpp"

#include <csignal>

namespace gyre::train {
namespace {
volatile std::sig_atomic_t g_requested = 0;

extern "C" void on_signal(int sig) {
  if (g_requested != 0) {
    // Second signal: give up waiting for the step to finish.
    std::signal(sig, SIG_DFL);
    std::raise(sig);
    return;
  }
  g_requested = 1;
}
}  // namespace

bool install_interrupt_handlers() {
  struct sigaction action {};
  action.sa_handler = on_signal;
  sigemptyset(&action.sa_mask);
  action.sa_flags = 0;
  return sigaction(SIGINT, &action, nullptr) == 0 && sigaction(SIGTERM, &action, nullptr) == 0;
}

bool interrupt_requested() noexcept {
  return g_requested != 0;
}
void reset_interrupt() noexcept {
  g_requested = 0;
}
void request_interrupt() noexcept {
  g_requested = 1;
}

}  // namespace gyre::train
