#pragma once
// Inner kernels of the runtime: matrix x vectors for f32, f16 and i8 weights. One portable
// implementation (plain loops with explicit 8-lane accumulators that compilers vectorise) and,
// on x86-64, AVX2+FMA+F16C, AVX-512 and AVX-512 VNNI versions compiled with target attributes
// and chosen at run time with __builtin_cpu_supports, so one binary runs on any x86-64 CPU.
//
// All kernels compute Y[t * ldy + r] = dot(W row r, X row t) for r < rows, t < n; W is
// row-major [rows x cols], X is [n x cols] contiguous.

#include <cstddef>
#include <cstdint>
#include <vector>

namespace gyre::runtime::detail {

enum class Isa { kPortable = 0, kAvx2 = 1, kAvx512 = 2, kAvx512Vnni = 3 };

/// Activations quantised to int8 per row (symmetric, scale = max|x| / 127): xs holds q, xu holds
/// q + 128 (unsigned, for the VNNI u8 x s8 instruction), scale[t] the row scale.
struct QuantizedRows {
  const std::int8_t* xs;
  const std::uint8_t* xu;
  const float* scale;
};

struct Kernels {
  const char* name;
  void (*matmul_f32)(const float* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n, float* y,
                     std::size_t ldy);
  void (*matmul_f16)(const std::uint16_t* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                     float* y, std::size_t ldy);
  /// w_scale[r] per weight row; w_sum[r] = sum of row r's q (used by the VNNI path).
  void (*matmul_i8)(const std::int8_t* w, const float* w_scale, const std::int32_t* w_sum, std::size_t rows,
                    std::size_t cols, QuantizedRows x, std::size_t n, float* y, std::size_t ldy);
  /// In place: x = 1 / (1 + e^-x) and x = tanh(x), absolute error <= 5e-7 (exp as in Cephes expf:
  /// range reduction by ln 2 and a degree-6 polynomial; tanh(x) = 2 sigmoid(2x) - 1).
  void (*sigmoid)(float* x, std::size_t n);
  void (*tanh)(float* x, std::size_t n);
};

bool isa_supported(Isa isa) noexcept;
/// Kernels of one instruction set (must be supported).
const Kernels& kernels_for(Isa isa) noexcept;
/// The fastest supported set; GYRE_RUNTIME_ISA=portable|avx2|avx512|vnni in the environment
/// caps the choice (for testing and benchmarking).
const Kernels& best_kernels() noexcept;
Isa best_isa() noexcept;

/// Quantises n rows of x [n x cols] into xs/xu/scale (each sized by the caller).
void quantize_rows(const float* x, std::size_t n, std::size_t cols, std::int8_t* xs, std::uint8_t* xu,
                   float* scale) noexcept;

}  // namespace gyre::runtime::detail
