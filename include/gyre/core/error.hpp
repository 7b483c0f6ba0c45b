#pragma once
// Error types thrown by the gyre library. Every error that comes from bad input says where, the
// way "file:line: what is wrong" compilers and nlohmann/json do.

#include <cstddef>
#include <stdexcept>
#include <string>
#include <string_view>

namespace gyre {

/// Base of every exception gyre throws on purpose.
class Error : public std::runtime_error {
 public:
  explicit Error(const std::string& what) : std::runtime_error(what) {}
};

/// Malformed input data: message reads "path:line: message" (line omitted when 0).
class ParseError : public Error {
 public:
  ParseError(std::string_view path, std::size_t line, std::string_view message);
  const std::string& path() const noexcept { return path_; }
  std::size_t line() const noexcept { return line_; }

 private:
  std::string path_;
  std::size_t line_;
};

/// A model, checkpoint or vocabulary file that is corrupt, truncated or of another version.
class FormatError : public Error {
 public:
  FormatError(std::string_view path, std::string_view message);
};

/// An impossible or inconsistent setting; message names the setting.
class ConfigError : public Error {
 public:
  ConfigError(std::string_view setting, std::string_view message);
  /// The setting's key ("hidden_size").
  const std::string& setting() const noexcept { return setting_; }
  /// What is wrong, without the "setting 'x': " prefix of what().
  const std::string& detail() const noexcept { return detail_; }

 private:
  std::string setting_;
  std::string detail_;
};

/// Training stopped because the loss or a gradient stopped being finite.
class DivergenceError : public Error {
 public:
  using Error::Error;
};

/// Long work stopped on request (SIGINT/SIGTERM) before it finished; what it had made is dropped.
class Interrupted : public Error {
 public:
  using Error::Error;
};

/// An I/O failure (cannot open, write, rename ...).
class IoError : public Error {
 public:
  using Error::Error;
};

namespace detail {
[[noreturn]] void check_failed(const char* cond, const std::string& msg, const char* file, int line);
}  // namespace detail

}  // namespace gyre

/// Argument check at API boundaries; always on (like DYNET_ARG_CHECK). Throws gyre::Error.
#define GYRE_CHECK(cond, msg)                                                    \
  do {                                                                           \
    if (!(cond)) ::gyre::detail::check_failed(#cond, (msg), __FILE__, __LINE__); \
  } while (false)
