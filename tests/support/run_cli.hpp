#pragma once
// Runs the built gyre binary (GYRE_CLI_PATH) with shell-quoted arguments and captures its exit
// code, stdout and stderr.

#include <sys/wait.h>

#include <cstdlib>
#include <filesystem>
#include <string>
#include <vector>

#include "gyre/core/file.hpp"

namespace gyre::test {

struct CliRun {
  int exit_code = -1;
  std::string out, err;
};

inline std::string shell_quote(const std::string& s) {
  std::string q = "'";
  for (const char c : s) q += c == '\'' ? std::string("'\\''") : std::string(1, c);
  return q + "'";
}

/// `gyre args...` with stdin from `stdin_file` (empty: /dev/null); scratch files go to `dir`.
inline CliRun run_cli(const std::filesystem::path& dir, const std::vector<std::string>& args,
                      const std::string& stdin_file = "") {
  std::filesystem::create_directories(dir);
  const auto out = dir / "cli.stdout", err = dir / "cli.stderr";
  std::string command = shell_quote(GYRE_CLI_PATH);
  for (const auto& a : args) command += " " + shell_quote(a);
  command += " < " + shell_quote(stdin_file.empty() ? "/dev/null" : stdin_file);
  command += " > " + shell_quote(out.string()) + " 2> " + shell_quote(err.string());
  const int status = std::system(command.c_str());
  CliRun r;
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  r.out = read_file(out);
  r.err = read_file(err);
  return r;
}

/// Number of lines in s (a last line without '\n' counts).
inline std::size_t line_count(const std::string& s) {
  std::size_t n = 0;
  for (const char c : s) n += c == '\n';
  return n + (!s.empty() && s.back() != '\n');
}

}  // namespace gyre::test
