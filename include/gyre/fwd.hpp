#pragma once
// Forward declarations of gyre's main types, for headers that only pass them around.

namespace gyre {
class Error;
class ParseError;
class FormatError;
class ConfigError;
class Rng;
class AtomicFile;
}  // namespace gyre
