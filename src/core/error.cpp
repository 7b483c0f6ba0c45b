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

FormatError::FormatError(std::string_view path, std::string_view message)
    : Error(std::string(path) + ": " + std::string(message)) {}

ConfigError::ConfigError(std::string_view setting, std::string_view message)
    : Error("setting '" + std::string(setting) + "': " + std::string(message)) {}

namespace detail {
void check_failed(const char* cond, const std::string& msg, const char* file, int line) {
  throw Error(msg + " (check '" + cond + "' failed at " + file + ":" + std::to_string(line) + ")");
}
}  // namespace detail
}  // namespace gyre
