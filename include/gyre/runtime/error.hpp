#pragma once
// The one exception type of the embedded runtime (C++17, standard library only). The training
// library converts it into gyre::ParseError / gyre::FormatError where it knows the file and line.

#include <stdexcept>
#include <string>

namespace gyre::runtime {

/// Thrown by every runtime function on bad input, bad settings or a missing feature.
class Error : public std::runtime_error {
 public:
  explicit Error(const std::string& what) : std::runtime_error(what) {}
};

}  // namespace gyre::runtime
