// gyre options: every option of every command, read from the commands' own definitions (the
// CLI11 apps their setup built), as one Markdown table. The README's option table is this output
// (tools/update_readme_options.sh writes it there; a ctest test fails when the two differ), so the
// documented names, defaults and meanings cannot drift from the binary.

#include <algorithm>
#include <cstdio>
#include <map>
#include <memory>
#include <string>
#include <tuple>
#include <vector>

#include "cli/command.hpp"

namespace gyre::cli {
namespace {

// A Markdown table cell: '|' would end the cell, a line break the row.
std::string cell(std::string s) {
  std::string out;
  for (const char c : s) {
    if (c == '|')
      out += "\\|";
    else if (c == '\n')
      out += ' ';
    else
      out += c;
  }
  return out;
}

struct Row {
  std::string name, value, default_value, help;
  std::vector<std::string> commands;
};

std::string options_table(const CLI::App& app) {
  // One row per option that means the same (same name, value, default and help) in every command
  // listed; an option whose meaning or default differs between commands gets a row per meaning.
  std::vector<Row> rows;
  std::map<std::tuple<std::string, std::string, std::string, std::string>, std::size_t> index;
  for (const CLI::App* sub : app.get_subcommands([](const CLI::App*) { return true; })) {
    for (const CLI::Option* opt : sub->get_options()) {
      if (opt == sub->get_help_ptr() || opt->get_group().empty()) continue;  // hidden: --no-x of a flag pair
      Row row;
      row.name = opt->nonpositional() ? "--" + opt->get_lnames().front() : opt->get_name();
      if (!opt->nonpositional()) {
        for (char& c : row.name) c = static_cast<char>(c >= 'a' && c <= 'z' ? c - 'a' + 'A' : c);
      }
      row.value = opt->get_type_size() == 0 ? "" : opt->get_type_name();
      row.default_value = opt->get_default_str();
      row.help = opt->get_description();
      const auto key = std::make_tuple(row.name, row.value, row.default_value, row.help);
      const auto it = index.find(key);
      if (it != index.end()) {
        rows[it->second].commands.push_back(sub->get_name());
        continue;
      }
      row.commands.push_back(sub->get_name());
      index.emplace(key, rows.size());
      rows.push_back(std::move(row));
    }
  }
  std::stable_sort(rows.begin(), rows.end(), [](const Row& a, const Row& b) {
    // Positional arguments first, then options by name.
    const bool pa = a.name.rfind("--", 0) != 0, pb = b.name.rfind("--", 0) != 0;
    return pa != pb ? pa : a.name < b.name;
  });
  std::string out = "| option | commands | value | default | meaning |\n|---|---|---|---|---|\n";
  for (const auto& r : rows) {
    std::string commands;
    for (const auto& c : r.commands) commands += (commands.empty() ? "" : ", ") + c;
    out += "| `" + cell(r.name) + "` | " + commands + " | " + cell(r.value) + " | " +
           (r.default_value.empty() ? "" : "`" + cell(r.default_value) + "`") + " | " + cell(r.help) + " |\n";
  }
  return out;
}

const RegisterCommand kRegister{
    "options", "List every option of every command (name, commands, value, default, meaning) as Markdown",
    100, [](CLI::App& sub) -> Runner {
      sub.footer(
          "Example:\n  gyre options > options.md\n"
          "An option has one name, value and default in every command that takes it; the README's option\n"
          "table is this output (tools/update_readme_options.sh).");
      const CLI::App* parent = sub.get_parent();
      return [parent] {
        std::fputs(options_table(*parent).c_str(), stdout);
        return ExitCode::kOk;
      };
    }};

}  // namespace
}  // namespace gyre::cli
