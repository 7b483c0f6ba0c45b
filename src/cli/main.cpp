// gyre: one binary, one subcommand per job (see src/cli/<command>.cpp).

#include <algorithm>
#include <cstdio>
#include <exception>
#include <iostream>
#include <map>
#include <string>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/version.hpp"

namespace gyre::cli {
std::vector<CommandEntry>& command_registry() {
  static std::vector<CommandEntry> registry;
  return registry;
}
}  // namespace gyre::cli

int main(int argc, char** argv) {
  using gyre::cli::ExitCode;
  CLI::App app{"gyre: train, compare, evaluate and embed small LSTM/GRU text models on the CPU.\n"
               "Run `gyre <command> --help` for a command's options and an example."};
  app.set_version_flag("--version", std::string("gyre ") + std::string(gyre::version()));
  app.require_subcommand(1);
  app.failure_message(CLI::FailureMessage::help);

  auto& registry = gyre::cli::command_registry();
  std::sort(registry.begin(), registry.end(), [](const auto& a, const auto& b) { return a.order < b.order; });
  std::map<std::string, gyre::cli::Runner> runners;
  for (auto& entry : registry) {
    CLI::App* sub = app.add_subcommand(entry.name, entry.description);
    runners[entry.name] = entry.setup(*sub);
  }

  try {
    app.parse(argc, argv);
  } catch (const CLI::Success& e) {  // --help, --version
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    app.exit(e);
    return static_cast<int>(ExitCode::kBadInput);
  }

  try {
    for (CLI::App* sub : app.get_subcommands()) return static_cast<int>(runners.at(sub->get_name())());
  } catch (const gyre::ParseError& e) {
    std::cerr << "gyre: error: " << e.what() << '\n';
    return static_cast<int>(ExitCode::kBadInput);
  } catch (const gyre::ConfigError& e) {
    std::cerr << "gyre: error: " << e.what() << '\n';
    return static_cast<int>(ExitCode::kBadInput);
  } catch (const gyre::FormatError& e) {
    std::cerr << "gyre: error: " << e.what() << '\n';
    return static_cast<int>(ExitCode::kBadInput);
  } catch (const gyre::Error& e) {
    std::cerr << "gyre: error: " << e.what() << '\n';
    return static_cast<int>(ExitCode::kFailure);
  } catch (const std::bad_alloc&) {
    std::cerr << "gyre: error: out of memory\n";
    return static_cast<int>(ExitCode::kFailure);
  } catch (const std::exception& e) {
    std::cerr << "gyre: internal error: " << e.what() << '\n';
    return static_cast<int>(ExitCode::kFailure);
  }
  return static_cast<int>(ExitCode::kBadInput);
}
