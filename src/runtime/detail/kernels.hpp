#pragma once
// Inner kernels of the runtime: matrix x vectors for f32, f16 and i8 weights. One portable
// implementation (plain loops with explicit 8-lane accumulators that compilers vectorise) and,
// on x86-64, AVX2+FMA+F16C, AVX-512 and AVX-512 VNNI versions compiled with target attributes
// and chosen at run time with __builtin_cpu_supports, so one binary runs on any x86-64 CPU; on
// AArch64, NEON (base architecture) and NEON + SDOT (ARMv8.2 dot product, compiled with a target
// attribute and chosen when getauxval(AT_HWCAP) has HWCAP_ASIMDDP).
//
// All kernels compute Y[t * ldy + r] = dot(W row r, X row t) for r < rows, t < n; W is
// row-major [rows x cols] or repacked (pack_f32, pack_f16, pack_i8), X is [n x cols] contiguous.

#include <cstddef>
#include <cstdint>
#include <vector>

namespace gyre::runtime::detail {

/// Ranked within a family: x86 1..3, AArch64 4..5 (a higher rank is faster on CPUs that have it).
enum class Isa { kPortable = 0, kAvx2 = 1, kAvx512 = 2, kAvx512Vnni = 3, kNeon = 4, kNeonSdot = 5 };

/// Activations quantised to int8 per row (symmetric, scale = max|x| / 127): xs holds q, xu holds
/// q + 128 (unsigned, for the VNNI u8 x s8 instruction), scale[t] the row scale.
struct QuantizedRows {
  const std::int8_t* xs;
  const std::uint8_t* xu;
  const float* scale;
};

struct Kernels {
  const char* name;
  /// Row-major int8 product, for the sets without a packed one (matmul_packed_i8 nullptr).
  /// w_scale[r] per weight row; w_sum[r] = sum of row r's q (used by the VNNI path).
  void (*matmul_i8)(const std::int8_t* w, const float* w_scale, const std::int32_t* w_sum, std::size_t rows,
                    std::size_t cols, QuantizedRows x, std::size_t n, float* y, std::size_t ldy);
  /// In place: x = 1 / (1 + e^-x) and x = tanh(x), absolute error <= 5e-7 (exp as in Cephes expf:
  /// range reduction by ln 2 and a degree-6 polynomial; tanh(x) = 2 sigmoid(2x) - 1).
  void (*sigmoid)(float* x, std::size_t n);
  void (*tanh)(float* x, std::size_t n);
  /// matmul_f32_reference's product on weights repacked by pack_f32 (panels of 16 rows, column by
  /// column: no horizontal sums, and each x value is broadcast once per panel). The runtime packs
  /// every f32 and f16 matrix it multiplies, so these are its only f32/f16 products.
  void (*matmul_packed_f32)(const float* packed, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                            float* y, std::size_t ldy);
  /// Same product as matmul_i8 on weights repacked by pack_i8; nullptr when this instruction set
  /// has no packed int8 kernel (then matmul_i8 is used on the row-major weights).
  void (*matmul_packed_i8)(const std::int8_t* packed, const float* w_scale, const std::int32_t* w_sum,
                           std::size_t rows, std::size_t cols, QuantizedRows x, std::size_t n, float* y,
                           std::size_t ldy);
  /// matmul_f16_reference's product on weights repacked by pack_f16 (same panel layout as pack_f32).
  void (*matmul_packed_f16)(const std::uint16_t* packed, std::size_t rows, std::size_t cols, const float* x,
                            std::size_t n, float* y, std::size_t ldy);
};

/// Bytes needed by pack_i8: rows rounded up to 16, cols rounded up to 4.
inline std::size_t packed_size_i8(std::size_t rows, std::size_t cols) {
  return (rows + 15) / 16 * 16 * ((cols + 3) / 4 * 4);
}
/// out[p][g][r][k] = w[16 p + r][4 g + k]: 16 rows x 4 columns = one 64-byte VNNI operand.
void pack_i8(const std::int8_t* w, std::size_t rows, std::size_t cols, std::int8_t* out) noexcept;

inline constexpr std::size_t kPanelRows = 16;
/// Floats needed by pack_f32: rows rounded up to a multiple of 16, times cols.
inline std::size_t packed_size_f32(std::size_t rows, std::size_t cols) {
  return (rows + kPanelRows - 1) / kPanelRows * kPanelRows * cols;
}
/// out[p][c][r] = w[16 p + r][c] (zero for padded rows).
void pack_f32(const float* w, std::size_t rows, std::size_t cols, float* out) noexcept;
void pack_f16(const std::uint16_t* w, std::size_t rows, std::size_t cols, std::uint16_t* out) noexcept;

/// Row-major f32 and f16 (IEEE half) products in plain loops: the references the packed kernels
/// are tested against (within float rounding: they sum in another order).
void matmul_f32_reference(const float* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                          float* y, std::size_t ldy) noexcept;
void matmul_f16_reference(const std::uint16_t* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                          float* y, std::size_t ldy) noexcept;

bool isa_supported(Isa isa) noexcept;
/// Kernels of one instruction set (must be supported).
const Kernels& kernels_for(Isa isa) noexcept;
/// The fastest supported set; GYRE_RUNTIME_ISA=portable|avx2|avx512|vnni (x86-64) or
/// portable|neon|sdot (AArch64) in the environment caps the choice (for testing and benchmarking).
const Kernels& best_kernels() noexcept;
Isa best_isa() noexcept;

/// Quantises n rows of x [n x cols] into xs/xu/scale (each sized by the caller).
void quantize_rows(const float* x, std::size_t n, std::size_t cols, std::int8_t* xs, std::uint8_t* xu,
                   float* scale) noexcept;

}  // namespace gyre::runtime::detail
