#include "gyre/core/error.hpp"

namespace gyre {
namespace {
std::string where(std::string_view path, std::size_t line) {
  std::string out(path);
  if (line > 0) out += ":" + std::to_string(line);
  return out;
}
}  // namespace

ParseError::ParseError(std::string_view path, std::size_t line, std::string_view message)
    : Error(where(path, line) + ": " + std::string(message)), path_(path), line_(line) {}

namespace {
// "path: message", naming the path once even when the message (say, a runtime::Error passed on)
// already starts with it: "m/x.gyre: m/x.gyre: file is truncated" helped no one.
std::string with_path(std::string_view path, std::string_view message) {
  const std::string prefix = std::string(path) + ": ";
  if (!path.empty() && message.substr(0, prefix.size()) == prefix) return std::string(message);
  return prefix + std::string(message);
}
}  // namespace

FormatError::FormatError(std::string_view path, std::string_view message) : Error(with_path(path, message)) {}

ConfigError::ConfigError(std::string_view setting, std::string_view message)
    : Error("setting '" + std::string(setting) + "': " + std::string(message)),
      setting_(setting),
      detail_(message) {}

namespace detail {
void check_failed(const char* cond, const std::string& msg, const char* file, int line) {
  throw Error(msg + " (check '" + cond + "' failed at " + file + ":" + std::to_string(line) + ")");
}
}  // namespace detail
}  // namespace gyre
