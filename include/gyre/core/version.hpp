#pragma once
#include <string_view>

namespace gyre {
/// The library version, "MAJOR.MINOR.PATCH".
std::string_view version() noexcept;
}  // namespace gyre
