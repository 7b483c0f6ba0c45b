#pragma once
// Each `gyre <command>` lives in its own src/cli/<command>.cpp and registers itself with a
// namespace-scope RegisterCommand object, so adding a command touches no other file.

#include <CLI/CLI.hpp>

#include <functional>
#include <string>
#include <vector>

namespace gyre::cli {

/// Documented exit codes of the gyre binary.
enum class ExitCode : int {
  kOk = 0,
  kFailure = 1,      // runtime failure: I/O, divergence, internal error
  kBadInput = 2,     // bad usage, bad settings, malformed input files
  kInterrupted = 3,  // SIGINT/SIGTERM: state was saved, the run can be resumed
};

/// Runs a parsed command; returns its exit code.
using Runner = std::function<ExitCode()>;
/// Adds options to the (already created) subcommand and returns the runner that uses them.
using Setup = std::function<Runner(CLI::App& sub)>;

struct CommandEntry {
  std::string name;
  std::string description;
  int order;  // position in `gyre --help`
  Setup setup;
};

std::vector<CommandEntry>& command_registry();

struct RegisterCommand {
  RegisterCommand(std::string name, std::string description, int order, Setup setup) {
    command_registry().push_back({std::move(name), std::move(description), order, std::move(setup)});
  }
};

}  // namespace gyre::cli
