#include "gyre/core/version.hpp"

namespace gyre {
std::string_view version() noexcept { return GYRE_VERSION_STRING; }
}  // namespace gyre
