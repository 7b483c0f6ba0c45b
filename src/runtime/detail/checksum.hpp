#pragma once
// CRC-32C (Castagnoli): reflected polynomial 0x82F63B78 (normal form 0x1EDC6F41), initial value
// 0xFFFFFFFF, final XOR 0xFFFFFFFF, as defined for iSCSI in RFC 3720 section 12.1 / appendix B.4.
// Check value: crc32c("123456789") = 0xE3069283. Table-driven, slicing-by-8.

#include <cstddef>
#include <cstdint>

namespace gyre::runtime::detail {

/// Continues a CRC-32C: pass the previous result as `crc` (0 to start).
std::uint32_t crc32c(const void* data, std::size_t size, std::uint32_t crc = 0) noexcept;

}  // namespace gyre::runtime::detail
