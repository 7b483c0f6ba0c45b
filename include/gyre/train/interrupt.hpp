#pragma once
// SIGINT/SIGTERM handling for long runs: the first signal asks the trainer to stop after the
// current step (it then saves a checkpoint and says how to resume); a second one kills the
// process the default way.

namespace gyre::train {

/// Installs the handlers (idempotent). Returns false if they could not be installed.
bool install_interrupt_handlers();
/// True once SIGINT or SIGTERM arrived since the last reset.
bool interrupt_requested() noexcept;
/// Clears the flag (tests; a new run).
void reset_interrupt() noexcept;
/// Simulates a signal (tests, and the trainer's `stop_after_epoch` hook).
void request_interrupt() noexcept;

}  // namespace gyre::train
