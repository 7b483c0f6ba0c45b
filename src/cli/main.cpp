// gyre: one binary, one subcommand per job (see src/cli/<command>.cpp).

#include <algorithm>
#include <cstdio>
#include <exception>
#include <iostream>
#include <map>
#include <string>
#include <vector>

#include "cli/command.hpp"
#include "cli/options.hpp"
#include "gyre/core/error.hpp"
#include "gyre/core/suggest.hpp"
#include "gyre/core/version.hpp"

namespace gyre::cli {
std::vector<CommandEntry>& command_registry() {
  static std::vector<CommandEntry> registry;
  return registry;
}

namespace {

// One line, a suggestion when there is one, and where to look: exit code 2.
int usage_error(const std::string& command, const std::string& message) {
  const std::string help = command.empty() ? "gyre --help" : "gyre " + command + " --help";
  std::cerr << "gyre: error: " << (command.empty() ? "" : command + ": ") << message << " (see '" << help
            << "')\n";
  return static_cast<int>(ExitCode::kBadInput);
}

std::vector<std::string> option_names(const CLI::App& sub) {
  std::vector<std::string> names;
  for (const CLI::Option* opt : sub.get_options())
    for (const auto& n : opt->get_lnames()) names.push_back("--" + n);
  return names;
}

// Options renamed so that one thing has one name in every command: the old name is answered
// with the new one even when the spellings are far apart.
const std::map<std::string, std::string>& renamed_options() {
  static const std::map<std::string, std::string> renamed = {
      {"--data", "--test"},                             // eval (compare's name)
      {"--batch", "--batch-size"},                      // bench
      {"--max-size", "--max-vocab-size"},               // vocab (train's name and default)
      {"--drop-punctuation", "--no-keep-punctuation"},  // vocab (train's flag pair)
      {"--format", "--input-format"},                   // vocab: --format is predict's output format
  };
  return renamed;
}

// What was left over after parsing a subcommand: unknown options and surplus arguments.
std::string leftover_message(const CLI::App& sub, const std::vector<std::string>& rest) {
  for (const auto& arg : rest) {
    if (arg.size() > 1 && arg[0] == '-') {
      const std::string name = arg.substr(0, arg.find('='));
      const auto names = option_names(sub);
      const auto it = renamed_options().find(name);
      if (it != renamed_options().end() && std::find(names.begin(), names.end(), it->second) != names.end())
        return "unknown option '" + name + "'; did you mean '" + it->second +
               "' (its name in every command)?";
      return "unknown option '" + name + "'" + did_you_mean(name, names);
    }
  }
  return "unexpected argument '" + rest.front() + "'";
}

// The subcommand named on the command line, if any (also when parsing failed half way).
std::string named_command(int argc, char** argv, const std::vector<CommandEntry>& registry) {
  for (int i = 1; i < argc; ++i) {
    const std::string a = argv[i];
    if (!a.empty() && a[0] == '-') continue;
    for (const auto& e : registry)
      if (e.name == a) return a;
    return "";
  }
  return "";
}

}  // namespace
}  // namespace gyre::cli

int main(int argc, char** argv) {
  using gyre::cli::ExitCode;
  CLI::App app{
      "gyre: train, compare, evaluate and embed small LSTM/GRU text models on the CPU.\n"
      "Run `gyre <command> --help` for a command's options and an example."};
  app.set_version_flag("--version", std::string("gyre ") + std::string(gyre::version()));
  app.require_subcommand(1);

  auto& registry = gyre::cli::command_registry();
  std::sort(registry.begin(), registry.end(), [](const auto& a, const auto& b) { return a.order < b.order; });
  std::map<std::string, gyre::cli::Runner> runners;
  std::vector<std::string> command_names;
  for (auto& entry : registry) {
    CLI::App* sub = app.add_subcommand(entry.name, entry.description);
    sub->allow_extras();  // reported below, one line with a suggestion
    runners[entry.name] = entry.setup(*sub);
    command_names.push_back(entry.name);
  }

  const std::string command = gyre::cli::named_command(argc, argv, registry);
  try {
    app.parse(argc, argv);
  } catch (const CLI::Success& e) {  // --help, --version
    return app.exit(e);
  } catch (const CLI::ParseError& e) {
    if (command.empty()) {
      for (int i = 1; i < argc; ++i) {
        const std::string a = argv[i];
        if (!a.empty() && a[0] != '-')
          return gyre::cli::usage_error("",
                                        "unknown command '" + a + "'" + gyre::did_you_mean(a, command_names));
      }
      return gyre::cli::usage_error("", argc > 1 ? e.what() : "give a command");
    }
    // An unknown option is most likely the cause (a misspelt --test makes --test "required"):
    // name it rather than the consequence.
    {
      const CLI::App* sub = app.get_subcommand(command);
      const auto rest = sub->remaining();
      for (const auto& arg : rest)
        if (arg.size() > 1 && arg[0] == '-')
          return gyre::cli::usage_error(command, gyre::cli::leftover_message(*sub, rest));
    }
    return gyre::cli::usage_error(command, e.what());
  } catch (const gyre::cli::UsageError& e) {
    return gyre::cli::usage_error(command, e.what());
  }

  try {
    for (CLI::App* sub : app.get_subcommands()) {
      const auto rest = sub->remaining();
      if (!rest.empty())
        return gyre::cli::usage_error(sub->get_name(), gyre::cli::leftover_message(*sub, rest));
      return static_cast<int>(runners.at(sub->get_name())());
    }
  } catch (const gyre::cli::UsageError& e) {
    return gyre::cli::usage_error(command, e.what());
  } catch (const gyre::ParseError& e) {
    std::cerr << "gyre: error: " << e.what() << '\n';
    return static_cast<int>(ExitCode::kBadInput);
  } catch (const gyre::ConfigError& e) {
    // Settings are options: name the option ("--hidden-size: must be ...").
    std::cerr << "gyre: error: --" << gyre::train::dashed(e.setting()) << ": " << e.detail() << '\n';
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
