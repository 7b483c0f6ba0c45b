#include <algorithm>
#include <cfloat>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <string_view>

#include "runtime/detail/half.hpp"
#include "runtime/detail/kernels.hpp"

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <cpuid.h>
#include <immintrin.h>
#define GYRE_RUNTIME_X86 1
#endif
#if defined(__aarch64__) && (defined(__GNUC__) || defined(__clang__))
#include <arm_neon.h>
#include <sys/auxv.h>
#define GYRE_RUNTIME_ARM64 1
#ifndef HWCAP_ASIMDDP
#define HWCAP_ASIMDDP (1UL << 20)  // Linux arch/arm64/include/uapi/asm/hwcap.h
#endif
#endif

namespace gyre::runtime::detail {
namespace {

// ---- activations ------------------------------------------------------------------------------
// e^x after Cephes expf (S. Moshier): n = round(x log2 e), r = x - n ln2 (ln2 split in two parts
// for exactness), e^r by its degree-6 minimax polynomial, times 2^n built in the exponent bits.
// Branch-free so that the loops below vectorise for whatever target they are compiled for.
__attribute__((always_inline)) inline float exp_approx(float x) {
  x = x < -87.0f ? -87.0f : (x > 88.0f ? 88.0f : x);
  const float t = x * 1.44269504088896341f + 0.5f;
  int n = static_cast<int>(t);
  n -= static_cast<float>(n) > t ? 1 : 0;  // floor
  const float fn = static_cast<float>(n);
  float r = x - fn * 0.693359375f;
  r = r - fn * -2.12194440e-4f;
  float y = 1.9875691500e-4f;
  y = y * r + 1.3981999507e-3f;
  y = y * r + 8.3334519073e-3f;
  y = y * r + 4.1665795894e-2f;
  y = y * r + 1.6666665459e-1f;
  y = y * r + 5.0000001201e-1f;
  y = y * r * r + r + 1.0f;
  const std::int32_t bits = (n + 127) << 23;
  float scale;
  std::memcpy(&scale, &bits, sizeof scale);
  return y * scale;
}
__attribute__((always_inline)) inline void sigmoid_loop(float* x, std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) x[i] = 1.0f / (1.0f + exp_approx(-x[i]));
}
__attribute__((always_inline)) inline void tanh_loop(float* x, std::size_t n) {
  for (std::size_t i = 0; i < n; ++i) x[i] = 2.0f / (1.0f + exp_approx(-2.0f * x[i])) - 1.0f;
}

void sigmoid_portable(float* x, std::size_t n) { sigmoid_loop(x, n); }
void tanh_portable(float* x, std::size_t n) { tanh_loop(x, n); }

// ---- portable ---------------------------------------------------------------------------------
// Eight independent partial sums per dot product: the compiler may keep them in vector lanes
// without reassociating anything (no -ffast-math needed).

template <class Load>
inline float dot8(Load load, const float* x, std::size_t cols) {
  float acc[8] = {0, 0, 0, 0, 0, 0, 0, 0};
  std::size_t c = 0;
  for (; c + 8 <= cols; c += 8)
    for (std::size_t j = 0; j < 8; ++j) acc[j] += load(c + j) * x[c + j];
  float tail = 0.0f;
  for (; c < cols; ++c) tail += load(c) * x[c];
  return ((acc[0] + acc[4]) + (acc[1] + acc[5])) + ((acc[2] + acc[6]) + (acc[3] + acc[7])) + tail;
}

void matmul_f32_portable(const float* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n, float* y,
                         std::size_t ldy) {
  for (std::size_t t = 0; t < n; ++t)
    for (std::size_t r = 0; r < rows; ++r) {
      const float* wr = w + r * cols;
      y[t * ldy + r] = dot8([wr](std::size_t i) { return wr[i]; }, x + t * cols, cols);
    }
}

void matmul_f16_portable(const std::uint16_t* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                         float* y, std::size_t ldy) {
  for (std::size_t t = 0; t < n; ++t)
    for (std::size_t r = 0; r < rows; ++r) {
      const std::uint16_t* wr = w + r * cols;
      y[t * ldy + r] = dot8([wr](std::size_t i) { return half_to_float(wr[i]); }, x + t * cols, cols);
    }
}

void matmul_i8_portable(const std::int8_t* w, const float* w_scale, const std::int32_t*, std::size_t rows,
                        std::size_t cols, QuantizedRows x, std::size_t n, float* y, std::size_t ldy) {
  for (std::size_t t = 0; t < n; ++t) {
    const std::int8_t* xt = x.xs + t * cols;
    for (std::size_t r = 0; r < rows; ++r) {
      const std::int8_t* wr = w + r * cols;
      std::int32_t acc = 0;
      for (std::size_t c = 0; c < cols; ++c) acc += std::int32_t{wr[c]} * std::int32_t{xt[c]};
      y[t * ldy + r] = static_cast<float>(acc) * (w_scale[r] * x.scale[t]);
    }
  }
}

inline float to_float(float v) { return v; }
inline float to_float(std::uint16_t v) { return half_to_float(v); }

template <class W>
void matmul_packed_portable(const W* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n, float* y,
                            std::size_t ldy) {
  const std::size_t panels = (rows + kPanelRows - 1) / kPanelRows;
  for (std::size_t t = 0; t < n; ++t) {
    const float* xt = x + t * cols;
    for (std::size_t q = 0; q < panels; ++q) {
      const W* pq = p + q * kPanelRows * cols;
      float acc[kPanelRows] = {};
      for (std::size_t c = 0; c < cols; ++c)
        for (std::size_t r = 0; r < kPanelRows; ++r) acc[r] += to_float(pq[c * kPanelRows + r]) * xt[c];
      const std::size_t valid = std::min(kPanelRows, rows - q * kPanelRows);
      for (std::size_t r = 0; r < valid; ++r) y[t * ldy + q * kPanelRows + r] = acc[r];
    }
  }
}

void matmul_packed_f32_portable(const float* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                                float* y, std::size_t ldy) {
  matmul_packed_portable(p, rows, cols, x, n, y, ldy);
}
void matmul_packed_f16_portable(const std::uint16_t* p, std::size_t rows, std::size_t cols, const float* x,
                                std::size_t n, float* y, std::size_t ldy) {
  matmul_packed_portable(p, rows, cols, x, n, y, ldy);
}

constexpr Kernels kPortable{"portable", matmul_i8_portable, sigmoid_portable, tanh_portable,
                            matmul_packed_f32_portable, nullptr, matmul_packed_f16_portable};

#if defined(GYRE_RUNTIME_X86)
// ---- AVX2 + FMA + F16C ------------------------------------------------------------------------

#define GYRE_AVX2 __attribute__((target("avx2,fma,f16c")))

GYRE_AVX2 inline __m256 load(const float* p) { return _mm256_loadu_ps(p); }
GYRE_AVX2 inline __m256 load(const std::uint16_t* p) {
  return _mm256_cvtph_ps(_mm_loadu_si128(reinterpret_cast<const __m128i*>(p)));
}

// exp_approx with intrinsics (compilers leave the scalar loop unvectorised).
GYRE_AVX2 inline __m256 exp256(__m256 x) {
  x = _mm256_min_ps(_mm256_max_ps(x, _mm256_set1_ps(-87.0f)), _mm256_set1_ps(88.0f));
  const __m256 fn = _mm256_floor_ps(_mm256_fmadd_ps(x, _mm256_set1_ps(1.44269504088896341f), _mm256_set1_ps(0.5f)));
  __m256 r = _mm256_fnmadd_ps(fn, _mm256_set1_ps(0.693359375f), x);
  r = _mm256_fnmadd_ps(fn, _mm256_set1_ps(-2.12194440e-4f), r);
  __m256 y = _mm256_set1_ps(1.9875691500e-4f);
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(1.3981999507e-3f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(8.3334519073e-3f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(4.1665795894e-2f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(1.6666665459e-1f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(5.0000001201e-1f));
  y = _mm256_fmadd_ps(_mm256_mul_ps(y, r), r, _mm256_add_ps(r, _mm256_set1_ps(1.0f)));
  const __m256i bits = _mm256_slli_epi32(_mm256_add_epi32(_mm256_cvtps_epi32(fn), _mm256_set1_epi32(127)), 23);
  return _mm256_mul_ps(y, _mm256_castsi256_ps(bits));
}
GYRE_AVX2 void sigmoid_avx2(float* x, std::size_t n) {
  const __m256 one = _mm256_set1_ps(1.0f);
  std::size_t i = 0;
  for (; i + 8 <= n; i += 8) {
    const __m256 v = _mm256_loadu_ps(x + i);
    _mm256_storeu_ps(x + i, _mm256_div_ps(one, _mm256_add_ps(one, exp256(_mm256_sub_ps(_mm256_setzero_ps(), v)))));
  }
  sigmoid_loop(x + i, n - i);
}
GYRE_AVX2 void tanh_avx2(float* x, std::size_t n) {
  const __m256 one = _mm256_set1_ps(1.0f), two = _mm256_set1_ps(2.0f);
  std::size_t i = 0;
  for (; i + 8 <= n; i += 8) {
    const __m256 v = _mm256_loadu_ps(x + i);
    const __m256 e = exp256(_mm256_mul_ps(_mm256_set1_ps(-2.0f), v));
    _mm256_storeu_ps(x + i, _mm256_sub_ps(_mm256_div_ps(two, _mm256_add_ps(one, e)), one));
  }
  tanh_loop(x + i, n - i);
}

// R activation rows x (t .. t + R - 1) (texts of a batch, or time steps) share each weight load:
// 2R accumulators on one panel (16 weight rows). Each output is still one FMA chain over the
// columns in order, as in the one- and two-row loops below, so a row's result does not depend on
// how the rows were grouped. With 6 rows a weight vector loaded from L2 feeds 6 FMAs instead of 2:
// batch-64 throughput was bound by streaming the weights (measured on Zen 3, issue 13).
template <int R, class W>
GYRE_AVX2 inline void packed_rows_avx2(const W* p, std::size_t rows, std::size_t cols, const float* x,
                                       std::size_t t, float* y, std::size_t ldy) {
  const std::size_t panels = (rows + kPanelRows - 1) / kPanelRows;
  alignas(32) float out[kPanelRows];
  for (std::size_t q = 0; q < panels; ++q) {
    const W* pq = p + q * kPanelRows * cols;
    __m256 acc[R][2];
#pragma GCC unroll 8
    for (int r = 0; r < R; ++r) acc[r][0] = acc[r][1] = _mm256_setzero_ps();
    for (std::size_t c = 0; c < cols; ++c) {
      const __m256 w0 = load(pq + c * kPanelRows), w1 = load(pq + c * kPanelRows + 8);
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        const __m256 xv = _mm256_broadcast_ss(x + (t + r) * cols + c);
        acc[r][0] = _mm256_fmadd_ps(w0, xv, acc[r][0]);
        acc[r][1] = _mm256_fmadd_ps(w1, xv, acc[r][1]);
      }
    }
    const std::size_t valid = std::min(kPanelRows, rows - q * kPanelRows);
    if (valid == kPanelRows) {  // a whole panel: straight to y (a copy loop here cost ~20% at 128 columns)
#pragma GCC unroll 8
      for (int r = 0; r < R; ++r) {
        _mm256_storeu_ps(y + (t + r) * ldy + q * kPanelRows, acc[r][0]);
        _mm256_storeu_ps(y + (t + r) * ldy + q * kPanelRows + 8, acc[r][1]);
      }
      continue;
    }
#pragma GCC unroll 8
    for (int r = 0; r < R; ++r) {
      _mm256_store_ps(out, acc[r][0]);
      _mm256_store_ps(out + 8, acc[r][1]);
      for (std::size_t i = 0; i < valid; ++i) y[(t + r) * ldy + q * kPanelRows + i] = out[i];
    }
  }
}

// Six rows at a time (packed_rows_avx2), then two panels (32 rows, 4 accumulators of 8) per pass
// for independent FMA chains.
template <class W>
GYRE_AVX2 void matmul_packed_avx2(const W* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                                  float* y, std::size_t ldy) {
  const std::size_t panels = (rows + kPanelRows - 1) / kPanelRows;
  const std::size_t stride = kPanelRows * cols;
  alignas(32) float out[2 * kPanelRows];
  std::size_t t = 0;
  for (; t + 6 <= n; t += 6) packed_rows_avx2<6>(p, rows, cols, x, t, y, ldy);
  // Two activation rows (texts of a batch) share each weight load; every output keeps the
  // one-row loop's accumulation order (one accumulator per 8 rows, column by column).
  for (; t + 2 <= n; t += 2) {
    const float* x0 = x + t * cols;
    const float* x1 = x0 + cols;
    for (std::size_t q = 0; q < panels; q += 2) {
      const bool two = q + 1 < panels;
      const W* p0 = p + q * stride;
      const W* p1 = two ? p0 + stride : p0;
      __m256 a0 = _mm256_setzero_ps(), a1 = _mm256_setzero_ps(), a2 = _mm256_setzero_ps(),
             a3 = _mm256_setzero_ps();
      __m256 b0 = _mm256_setzero_ps(), b1 = _mm256_setzero_ps(), b2 = _mm256_setzero_ps(),
             b3 = _mm256_setzero_ps();
      for (std::size_t c = 0; c < cols; ++c) {
        const __m256 w0 = load(p0 + c * kPanelRows), w1 = load(p0 + c * kPanelRows + 8);
        const __m256 w2 = load(p1 + c * kPanelRows), w3 = load(p1 + c * kPanelRows + 8);
        const __m256 x0v = _mm256_broadcast_ss(x0 + c), x1v = _mm256_broadcast_ss(x1 + c);
        a0 = _mm256_fmadd_ps(w0, x0v, a0);
        a1 = _mm256_fmadd_ps(w1, x0v, a1);
        a2 = _mm256_fmadd_ps(w2, x0v, a2);
        a3 = _mm256_fmadd_ps(w3, x0v, a3);
        b0 = _mm256_fmadd_ps(w0, x1v, b0);
        b1 = _mm256_fmadd_ps(w1, x1v, b1);
        b2 = _mm256_fmadd_ps(w2, x1v, b2);
        b3 = _mm256_fmadd_ps(w3, x1v, b3);
      }
      const std::size_t valid = std::min((two ? 2 : 1) * kPanelRows, rows - q * kPanelRows);
      if (valid == 2 * kPanelRows) {  // two whole panels: straight to y
        float* y0 = y + t * ldy + q * kPanelRows;
        float* y1 = y0 + ldy;
        _mm256_storeu_ps(y0, a0);
        _mm256_storeu_ps(y0 + 8, a1);
        _mm256_storeu_ps(y0 + 16, a2);
        _mm256_storeu_ps(y0 + 24, a3);
        _mm256_storeu_ps(y1, b0);
        _mm256_storeu_ps(y1 + 8, b1);
        _mm256_storeu_ps(y1 + 16, b2);
        _mm256_storeu_ps(y1 + 24, b3);
        continue;
      }
      _mm256_store_ps(out, a0);
      _mm256_store_ps(out + 8, a1);
      _mm256_store_ps(out + 16, a2);
      _mm256_store_ps(out + 24, a3);
      for (std::size_t r = 0; r < valid; ++r) y[t * ldy + q * kPanelRows + r] = out[r];
      _mm256_store_ps(out, b0);
      _mm256_store_ps(out + 8, b1);
      _mm256_store_ps(out + 16, b2);
      _mm256_store_ps(out + 24, b3);
      for (std::size_t r = 0; r < valid; ++r) y[(t + 1) * ldy + q * kPanelRows + r] = out[r];
    }
  }
  for (; t < n; ++t) {
    const float* xt = x + t * cols;
    for (std::size_t q = 0; q < panels; q += 2) {
      const bool two = q + 1 < panels;
      const W* p0 = p + q * stride;
      const W* p1 = two ? p0 + stride : p0;
      __m256 a0 = _mm256_setzero_ps(), a1 = _mm256_setzero_ps(), a2 = _mm256_setzero_ps(), a3 = _mm256_setzero_ps();
      for (std::size_t c = 0; c < cols; ++c) {
        const __m256 xv = _mm256_broadcast_ss(xt + c);
        a0 = _mm256_fmadd_ps(load(p0 + c * kPanelRows), xv, a0);
        a1 = _mm256_fmadd_ps(load(p0 + c * kPanelRows + 8), xv, a1);
        a2 = _mm256_fmadd_ps(load(p1 + c * kPanelRows), xv, a2);
        a3 = _mm256_fmadd_ps(load(p1 + c * kPanelRows + 8), xv, a3);
      }
      const std::size_t valid = std::min((two ? 2 : 1) * kPanelRows, rows - q * kPanelRows);
      float* yt = y + t * ldy + q * kPanelRows;
      if (valid == 2 * kPanelRows) {  // two whole panels: straight to y
        _mm256_storeu_ps(yt, a0);
        _mm256_storeu_ps(yt + 8, a1);
        _mm256_storeu_ps(yt + 16, a2);
        _mm256_storeu_ps(yt + 24, a3);
        continue;
      }
      _mm256_store_ps(out, a0);
      _mm256_store_ps(out + 8, a1);
      _mm256_store_ps(out + 16, a2);
      _mm256_store_ps(out + 24, a3);
      for (std::size_t r = 0; r < valid; ++r) yt[r] = out[r];
    }
  }
}

GYRE_AVX2 void matmul_packed_f32_avx2(const float* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                                      float* y, std::size_t ldy) {
  matmul_packed_avx2(p, rows, cols, x, n, y, ldy);
}
GYRE_AVX2 void matmul_packed_f16_avx2(const std::uint16_t* p, std::size_t rows, std::size_t cols, const float* x,
                                      std::size_t n, float* y, std::size_t ldy) {
  matmul_packed_avx2(p, rows, cols, x, n, y, ldy);
}

// Packed int8 weights (pack_i8: 16 rows x 4 columns per 64 bytes, rows 0-7 in the first 32).
// AVX2 has no u8 x s8 dot product into int32 (VNNI's vpdpbusd); vpmaddubsw multiplies u8 by s8
// bytes into saturating int16 pair sums, and vpmaddwd by ones adds the pairs into int32. Exact
// here: the unsigned operand is |w| (<= 128, also for w = -128) and the signed one is x with w's
// sign (vpsignb; |x| <= 127 as quantize_rows clamps), so a pair sum is at most 2 * 128 * 127 =
// 32512 < 32767. The integer sums are exact, so the results equal matmul_i8's bit for bit, for
// any grouping of rows. R activation rows (texts of a batch, or time steps) share each weight
// load; P panels per pass, in halves of 8 rows, give 2P independent chains per row.

// One group of 4 columns of P panels (pg[i]: panel i's group): acc[r][k] += the 8 rows in half k % 2
// of panel k / 2 . the 4 bytes of x row r.
template <std::size_t R, std::size_t P>
GYRE_AVX2 __attribute__((always_inline)) inline void i8_group_avx2(const std::int8_t* const (&pg)[P], std::size_t off,
                                                                   const std::int32_t* xb, __m256i (&acc)[R][2 * P]) {
  const __m256i ones = _mm256_set1_epi16(1);
#pragma GCC unroll 4
  for (std::size_t k = 0; k < 2 * P; ++k) {
    const __m256i w = _mm256_loadu_si256(reinterpret_cast<const __m256i*>(pg[k / 2] + off + (k % 2) * 32));
    const __m256i aw = _mm256_abs_epi8(w);
#pragma GCC unroll 8
    for (std::size_t r = 0; r < R; ++r) {
      const __m256i sx = _mm256_sign_epi8(_mm256_set1_epi32(xb[r]), w);
      acc[r][k] = _mm256_add_epi32(acc[r][k], _mm256_madd_epi16(_mm256_maddubs_epi16(aw, sx), ones));
    }
  }
}

// Rows t0 .. t0 + R - 1 of x against panels q0 .. q0 + P - 1 (a missing last panel reads panel q0
// again and stores nothing).
template <std::size_t R, std::size_t P>
GYRE_AVX2 inline void packed_i8_avx2_rows(const std::int8_t* p, const float* w_scale, std::size_t rows,
                                          std::size_t cols, QuantizedRows x, std::size_t t0, std::size_t q0,
                                          float* y, std::size_t ldy) {
  const std::size_t groups = (cols + 3) / 4;
  const std::size_t full = cols / 4;
  const std::size_t stride = groups * 64;
  const std::size_t panels = (rows + 15) / 16;
  const std::int8_t* xt[R];
  std::int32_t tail[R];
  for (std::size_t r = 0; r < R; ++r) {
    xt[r] = x.xs + (t0 + r) * cols;
    std::int8_t b[4] = {0, 0, 0, 0};  // padded columns: their weights are 0 too
    for (std::size_t k = 0; k < cols - full * 4; ++k) b[k] = xt[r][full * 4 + k];
    std::memcpy(&tail[r], b, 4);
  }
  const std::int8_t* pg[P];
  for (std::size_t i = 0; i < P; ++i) pg[i] = p + (q0 + i < panels ? q0 + i : q0) * stride;
  __m256i acc[R][2 * P];
#pragma GCC unroll 8
  for (std::size_t r = 0; r < R; ++r)
#pragma GCC unroll 4
    for (std::size_t k = 0; k < 2 * P; ++k) acc[r][k] = _mm256_setzero_si256();
  for (std::size_t g = 0; g < full; ++g) {
    std::int32_t xb[R];
#pragma GCC unroll 8
    for (std::size_t r = 0; r < R; ++r) std::memcpy(&xb[r], xt[r] + 4 * g, 4);
    i8_group_avx2<R, P>(pg, g * 64, xb, acc);
  }
  if (full < groups) i8_group_avx2<R, P>(pg, full * 64, tail, acc);
  alignas(32) std::int32_t out[8];
  for (std::size_t k = 0; k < 2 * P; ++k) {
    const std::size_t base = q0 * 16 + k * 8;
    if (base >= rows) break;
    if (base + 8 <= rows) {
      const __m256 ws = _mm256_loadu_ps(w_scale + base);
      for (std::size_t r = 0; r < R; ++r)
        _mm256_storeu_ps(y + (t0 + r) * ldy + base, _mm256_mul_ps(_mm256_cvtepi32_ps(acc[r][k]),
                                                                   _mm256_mul_ps(ws, _mm256_set1_ps(x.scale[t0 + r]))));
      continue;
    }
    for (std::size_t r = 0; r < R; ++r) {
      _mm256_store_si256(reinterpret_cast<__m256i*>(out), acc[r][k]);
      for (std::size_t i = 0; base + i < rows; ++i)
        y[(t0 + r) * ldy + base + i] = static_cast<float>(out[i]) * (w_scale[base + i] * x.scale[t0 + r]);
    }
  }
}

GYRE_AVX2 void matmul_packed_i8_avx2(const std::int8_t* p, const float* w_scale, const std::int32_t*,
                                     std::size_t rows, std::size_t cols, QuantizedRows x, std::size_t n, float* y,
                                     std::size_t ldy) {
  const std::size_t panels = (rows + 15) / 16;
  std::size_t t = 0;
  // Three rows or one row, two panels per pass. On Zen 3 at 512 x 64-128 (noisy host) three, four
  // or five rows gave 55-64 G int8 MACs/s in a loop of products, 1.3x the f32 products' 46 (that
  // CPU's SGEMM peak, 94 GFLOP/s), and one row 50-57 with two panels, 47 with one; in the batched
  // call three rows x one panel ran 10-20% slower than x two. More shapes would cost code the
  // runtime's size budget does not have (tests/runtime/extra.cmake).
  for (; t + 3 <= n; t += 3)
    for (std::size_t q = 0; q < panels; q += 2) packed_i8_avx2_rows<3, 2>(p, w_scale, rows, cols, x, t, q, y, ldy);
  for (; t < n; ++t)
    for (std::size_t q = 0; q < panels; q += 2) packed_i8_avx2_rows<1, 2>(p, w_scale, rows, cols, x, t, q, y, ldy);
}

// Every x86 SIMD level has a packed int8 product, which the runtime always uses (int8 matrices are
// packed at load), so the row-major matmul_i8 is the portable loop there: no code that nothing runs
// (the runtime's size is budgeted, tests/runtime/extra.cmake).
constexpr Kernels kAvx2{"avx2", matmul_i8_portable, sigmoid_avx2, tanh_avx2, matmul_packed_f32_avx2,
                        matmul_packed_i8_avx2, matmul_packed_f16_avx2};

// ---- AVX-512 (F + BW) -------------------------------------------------------------------------
#define GYRE_AVX512 __attribute__((target("avx512f,avx512bw,avx512vl,fma,f16c")))

GYRE_AVX512 inline __m512 load(const float* p, __mmask16 m) { return _mm512_maskz_loadu_ps(m, p); }
GYRE_AVX512 inline __m512 load(const std::uint16_t* p, __mmask16 m) {
  return _mm512_cvtph_ps(_mm256_maskz_loadu_epi16(m, p));
}

GYRE_AVX512 inline __m512 exp512(__m512 x) {
  x = _mm512_min_ps(_mm512_max_ps(x, _mm512_set1_ps(-87.0f)), _mm512_set1_ps(88.0f));
  const __m512 fn = _mm512_roundscale_ps(
      _mm512_fmadd_ps(x, _mm512_set1_ps(1.44269504088896341f), _mm512_set1_ps(0.5f)), _MM_FROUND_TO_NEG_INF | _MM_FROUND_NO_EXC);
  __m512 r = _mm512_fnmadd_ps(fn, _mm512_set1_ps(0.693359375f), x);
  r = _mm512_fnmadd_ps(fn, _mm512_set1_ps(-2.12194440e-4f), r);
  __m512 y = _mm512_set1_ps(1.9875691500e-4f);
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(1.3981999507e-3f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(8.3334519073e-3f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(4.1665795894e-2f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(1.6666665459e-1f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(5.0000001201e-1f));
  y = _mm512_fmadd_ps(_mm512_mul_ps(y, r), r, _mm512_add_ps(r, _mm512_set1_ps(1.0f)));
  return _mm512_scalef_ps(y, fn);  // y * 2^fn
}
GYRE_AVX512 void sigmoid_avx512(float* x, std::size_t n) {
  const __m512 one = _mm512_set1_ps(1.0f);
  for (std::size_t i = 0; i < n; i += 16) {
    const __mmask16 m = n - i >= 16 ? __mmask16(0xFFFF) : static_cast<__mmask16>((1U << (n - i)) - 1U);
    const __m512 v = _mm512_maskz_loadu_ps(m, x + i);
    _mm512_mask_storeu_ps(x + i, m, _mm512_div_ps(one, _mm512_add_ps(one, exp512(_mm512_sub_ps(_mm512_setzero_ps(), v)))));
  }
}
GYRE_AVX512 void tanh_avx512(float* x, std::size_t n) {
  const __m512 one = _mm512_set1_ps(1.0f), two = _mm512_set1_ps(2.0f);
  for (std::size_t i = 0; i < n; i += 16) {
    const __mmask16 m = n - i >= 16 ? __mmask16(0xFFFF) : static_cast<__mmask16>((1U << (n - i)) - 1U);
    const __m512 e = exp512(_mm512_mul_ps(_mm512_set1_ps(-2.0f), _mm512_maskz_loadu_ps(m, x + i)));
    _mm512_mask_storeu_ps(x + i, m, _mm512_sub_ps(_mm512_div_ps(two, _mm512_add_ps(one, e)), one));
  }
}

// Four panels (64 rows) per pass: four independent FMA chains hide the FMA latency.
template <class W>
GYRE_AVX512 void matmul_packed_avx512(const W* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                                      float* y, std::size_t ldy) {
  constexpr __mmask16 all = 0xFFFF;
  const std::size_t panels = (rows + kPanelRows - 1) / kPanelRows;
  const std::size_t stride = kPanelRows * cols;
  std::size_t t0 = 0;
  // Several activation rows (time steps, or texts of a batch): each weight vector loaded once
  // feeds four rows; two panels per pass give eight independent FMA chains.
  for (; t0 + 4 <= n; t0 += 4) {
    const float* x0 = x + t0 * cols;
    std::size_t q = 0;
    for (; q + 2 <= panels; q += 2) {
      const W* pq = p + q * stride;
      __m512 a0 = _mm512_setzero_ps(), a1 = _mm512_setzero_ps(), a2 = _mm512_setzero_ps(),
             a3 = _mm512_setzero_ps();
      __m512 b0 = _mm512_setzero_ps(), b1 = _mm512_setzero_ps(), b2 = _mm512_setzero_ps(),
             b3 = _mm512_setzero_ps();
      for (std::size_t c = 0; c < cols; ++c) {
        const __m512 w0 = load(pq + c * kPanelRows, all);
        const __m512 w1 = load(pq + stride + c * kPanelRows, all);
        const __m512 x0v = _mm512_set1_ps(x0[c]), x1v = _mm512_set1_ps(x0[cols + c]);
        const __m512 x2v = _mm512_set1_ps(x0[2 * cols + c]), x3v = _mm512_set1_ps(x0[3 * cols + c]);
        a0 = _mm512_fmadd_ps(w0, x0v, a0);
        b0 = _mm512_fmadd_ps(w1, x0v, b0);
        a1 = _mm512_fmadd_ps(w0, x1v, a1);
        b1 = _mm512_fmadd_ps(w1, x1v, b1);
        a2 = _mm512_fmadd_ps(w0, x2v, a2);
        b2 = _mm512_fmadd_ps(w1, x2v, b2);
        a3 = _mm512_fmadd_ps(w0, x3v, a3);
        b3 = _mm512_fmadd_ps(w1, x3v, b3);
      }
      const std::size_t base = q * kPanelRows;  // panel q is full: panel q + 1 follows it
      _mm512_storeu_ps(y + t0 * ldy + base, a0);
      _mm512_storeu_ps(y + (t0 + 1) * ldy + base, a1);
      _mm512_storeu_ps(y + (t0 + 2) * ldy + base, a2);
      _mm512_storeu_ps(y + (t0 + 3) * ldy + base, a3);
      const auto m = static_cast<__mmask16>((1U << std::min(kPanelRows, rows - base - kPanelRows)) - 1U);
      _mm512_mask_storeu_ps(y + t0 * ldy + base + kPanelRows, m, b0);
      _mm512_mask_storeu_ps(y + (t0 + 1) * ldy + base + kPanelRows, m, b1);
      _mm512_mask_storeu_ps(y + (t0 + 2) * ldy + base + kPanelRows, m, b2);
      _mm512_mask_storeu_ps(y + (t0 + 3) * ldy + base + kPanelRows, m, b3);
    }
    for (; q < panels; ++q) {
      const W* pq = p + q * stride;
      __m512 a0 = _mm512_setzero_ps(), a1 = _mm512_setzero_ps(), a2 = _mm512_setzero_ps(), a3 = _mm512_setzero_ps();
      for (std::size_t c = 0; c < cols; ++c) {
        const __m512 wv = load(pq + c * kPanelRows, all);
        a0 = _mm512_fmadd_ps(wv, _mm512_set1_ps(x0[c]), a0);
        a1 = _mm512_fmadd_ps(wv, _mm512_set1_ps(x0[cols + c]), a1);
        a2 = _mm512_fmadd_ps(wv, _mm512_set1_ps(x0[2 * cols + c]), a2);
        a3 = _mm512_fmadd_ps(wv, _mm512_set1_ps(x0[3 * cols + c]), a3);
      }
      const std::size_t base = q * kPanelRows;
      const auto m = static_cast<__mmask16>((1U << std::min(kPanelRows, rows - base)) - 1U);
      _mm512_mask_storeu_ps(y + t0 * ldy + base, m, a0);
      _mm512_mask_storeu_ps(y + (t0 + 1) * ldy + base, m, a1);
      _mm512_mask_storeu_ps(y + (t0 + 2) * ldy + base, m, a2);
      _mm512_mask_storeu_ps(y + (t0 + 3) * ldy + base, m, a3);
    }
  }
  for (std::size_t t = t0; t < n; ++t) {
    const float* xt = x + t * cols;
    float* yt = y + t * ldy;
    std::size_t q = 0;
    for (; q + 4 <= panels; q += 4) {
      const W* p0 = p + q * stride;
      __m512 a0 = _mm512_setzero_ps(), a1 = _mm512_setzero_ps(), a2 = _mm512_setzero_ps(), a3 = _mm512_setzero_ps();
      for (std::size_t c = 0; c < cols; ++c) {
        const __m512 xv = _mm512_set1_ps(xt[c]);
        const W* pc = p0 + c * kPanelRows;
        a0 = _mm512_fmadd_ps(load(pc, all), xv, a0);
        a1 = _mm512_fmadd_ps(load(pc + stride, all), xv, a1);
        a2 = _mm512_fmadd_ps(load(pc + 2 * stride, all), xv, a2);
        a3 = _mm512_fmadd_ps(load(pc + 3 * stride, all), xv, a3);
      }
      const __m512 acc[4] = {a0, a1, a2, a3};
      for (std::size_t k = 0; k < 4; ++k) {
        const std::size_t base = (q + k) * kPanelRows;
        const std::size_t valid = std::min(kPanelRows, rows - base);
        _mm512_mask_storeu_ps(yt + base, static_cast<__mmask16>((1U << valid) - 1U), acc[k]);
      }
    }
    if (q < panels) {
      // The last one to three panels: one accumulator per panel, column by column, as in the
      // blocks above. Every output row is summed in the same order whichever path computes it,
      // so a text's result never depends on how many other rows (batch mates) share the call.
      const std::size_t np = panels - q;
      const W* p0 = p + q * stride;
      __m512 a0 = _mm512_setzero_ps(), a1 = _mm512_setzero_ps(), a2 = _mm512_setzero_ps();
      for (std::size_t c = 0; c < cols; ++c) {
        const __m512 xv = _mm512_set1_ps(xt[c]);
        const W* pc = p0 + c * kPanelRows;
        a0 = _mm512_fmadd_ps(load(pc, all), xv, a0);
        if (np > 1) a1 = _mm512_fmadd_ps(load(pc + stride, all), xv, a1);
        if (np > 2) a2 = _mm512_fmadd_ps(load(pc + 2 * stride, all), xv, a2);
      }
      const __m512 acc[3] = {a0, a1, a2};
      for (std::size_t k = 0; k < np; ++k) {
        const std::size_t base = (q + k) * kPanelRows;
        const std::size_t valid = std::min(kPanelRows, rows - base);
        _mm512_mask_storeu_ps(yt + base, static_cast<__mmask16>((1U << valid) - 1U), acc[k]);
      }
    }
  }
}

GYRE_AVX512 void matmul_packed_f32_avx512(const float* p, std::size_t rows, std::size_t cols, const float* x,
                                          std::size_t n, float* y, std::size_t ldy) {
  matmul_packed_avx512(p, rows, cols, x, n, y, ldy);
}
GYRE_AVX512 void matmul_packed_f16_avx512(const std::uint16_t* p, std::size_t rows, std::size_t cols, const float* x,
                                          std::size_t n, float* y, std::size_t ldy) {
  matmul_packed_avx512(p, rows, cols, x, n, y, ldy);
}

// Without VNNI, the AVX2 packed int8 product (vpmaddubsw) serves AVX-512 CPUs too.
constexpr Kernels kAvx512{"avx512", matmul_i8_portable, sigmoid_avx512, tanh_avx512, matmul_packed_f32_avx512,
                          matmul_packed_i8_avx2, matmul_packed_f16_avx512};

// ---- AVX-512 VNNI -----------------------------------------------------------------------------
// vpdpbusd multiplies unsigned by signed bytes, so activations enter as q + 128 and the result
// is corrected by 128 * sum(w row): sum((q+128) w) - 128 sum(w) = sum(q w), exact in int32.
#define GYRE_VNNI __attribute__((target("avx512f,avx512bw,avx512vl,avx512vnni,fma,f16c")))

// Packed weights: 16 rows x 4 columns per 64-byte operand, the 4 activation bytes broadcast;
// four panels per pass keep four independent dpbusd chains per activation row, and R rows
// (time steps, or texts of a batch) share each weight load. No horizontal sums; the integer sums
// are exact, so a row's result is the same for any R.
template <std::size_t R>
GYRE_VNNI inline void packed_i8_vnni_rows(const std::int8_t* p, const float* w_scale,
                                          const std::int32_t* w_sum, std::size_t rows, std::size_t cols,
                                          QuantizedRows x, std::size_t t0, float* y, std::size_t ldy) {
  const std::size_t panels = (rows + 15) / 16;
  const std::size_t groups = (cols + 3) / 4;
  const std::size_t full = cols / 4;
  const std::size_t stride = groups * 64;
  const __m512i c128 = _mm512_set1_epi32(128);
  const std::uint8_t* xt[R];
  std::uint32_t tail[R];
  for (std::size_t r = 0; r < R; ++r) {
    xt[r] = x.xu + (t0 + r) * cols;
    tail[r] = 0x80808080U;  // padded columns: any value (their weights are 0)
    for (std::size_t k = 0; k < cols - full * 4; ++k)
      tail[r] = (tail[r] & ~(0xFFU << (8 * k))) | (std::uint32_t{xt[r][full * 4 + k]} << (8 * k));
  }
  for (std::size_t q = 0; q < panels; q += 4) {
    const std::size_t np = std::min<std::size_t>(4, panels - q);
    const std::int8_t* p0 = p + q * stride;
    __m512i a[R][4];
    for (std::size_t r = 0; r < R; ++r)
      for (std::size_t k = 0; k < 4; ++k) a[r][k] = _mm512_setzero_si512();
    if (np == 4) {
      for (std::size_t g = 0; g < full; ++g) {
        const std::int8_t* pg = p0 + g * 64;
        const __m512i w0 = _mm512_loadu_si512(pg), w1 = _mm512_loadu_si512(pg + stride);
        const __m512i w2 = _mm512_loadu_si512(pg + 2 * stride), w3 = _mm512_loadu_si512(pg + 3 * stride);
        for (std::size_t r = 0; r < R; ++r) {
          std::uint32_t xb;
          std::memcpy(&xb, xt[r] + 4 * g, 4);
          const __m512i xv = _mm512_set1_epi32(static_cast<int>(xb));
          a[r][0] = _mm512_dpbusd_epi32(a[r][0], xv, w0);
          a[r][1] = _mm512_dpbusd_epi32(a[r][1], xv, w1);
          a[r][2] = _mm512_dpbusd_epi32(a[r][2], xv, w2);
          a[r][3] = _mm512_dpbusd_epi32(a[r][3], xv, w3);
        }
      }
    } else {
      for (std::size_t g = 0; g < full; ++g)
        for (std::size_t r = 0; r < R; ++r) {
          std::uint32_t xb;
          std::memcpy(&xb, xt[r] + 4 * g, 4);
          const __m512i xv = _mm512_set1_epi32(static_cast<int>(xb));
          for (std::size_t k = 0; k < np; ++k)
            a[r][k] = _mm512_dpbusd_epi32(a[r][k], xv, _mm512_loadu_si512(p0 + k * stride + g * 64));
        }
    }
    if (full < groups)
      for (std::size_t r = 0; r < R; ++r) {
        const __m512i xv = _mm512_set1_epi32(static_cast<int>(tail[r]));
        for (std::size_t k = 0; k < np; ++k)
          a[r][k] = _mm512_dpbusd_epi32(a[r][k], xv, _mm512_loadu_si512(p0 + k * stride + full * 64));
      }
    for (std::size_t k = 0; k < np; ++k) {
      const std::size_t base = (q + k) * 16;
      const std::size_t valid = std::min<std::size_t>(16, rows - base);
      const __mmask16 m = static_cast<__mmask16>((1U << valid) - 1U);
      const __m512i corr = _mm512_mullo_epi32(_mm512_maskz_loadu_epi32(m, w_sum + base), c128);
      const __m512 ws = _mm512_maskz_loadu_ps(m, w_scale + base);
      for (std::size_t r = 0; r < R; ++r) {
        const __m512i exact = _mm512_sub_epi32(a[r][k], corr);
        const __m512 xs = _mm512_set1_ps(x.scale[t0 + r]);
        _mm512_mask_storeu_ps(y + (t0 + r) * ldy + base, m,
                              _mm512_mul_ps(_mm512_cvtepi32_ps(exact), _mm512_mul_ps(ws, xs)));
      }
    }
  }
}

GYRE_VNNI void matmul_packed_i8_vnni(const std::int8_t* p, const float* w_scale, const std::int32_t* w_sum,
                                     std::size_t rows, std::size_t cols, QuantizedRows x, std::size_t n,
                                     float* y, std::size_t ldy) {
  std::size_t t = 0;
  for (; t + 4 <= n; t += 4) packed_i8_vnni_rows<4>(p, w_scale, w_sum, rows, cols, x, t, y, ldy);
  for (; t < n; ++t) packed_i8_vnni_rows<1>(p, w_scale, w_sum, rows, cols, x, t, y, ldy);
}

constexpr Kernels kAvx512Vnni{"avx512-vnni", matmul_i8_portable, sigmoid_avx512, tanh_avx512,
                              matmul_packed_f32_avx512, matmul_packed_i8_vnni, matmul_packed_f16_avx512};
#endif  // GYRE_RUNTIME_X86

#if defined(GYRE_RUNTIME_ARM64)
// ---- AArch64 Advanced SIMD (NEON) -------------------------------------------------------------
// NEON is part of the AArch64 base architecture, so these need no target attribute; the SDOT
// kernels below do (ARMv8.2 dot product, HWCAP_ASIMDDP).

inline float32x4_t load4(const float* p) {
  return vld1q_f32(p);
}
inline float32x4_t load4(const std::uint16_t* p) {
  return vcvt_f32_f16(vreinterpret_f16_u16(vld1_u16(p)));
}

// int8 without the dot-product instructions: SMULL/SMULL2 to int16 (|q| <= 127, so each product
// fits), SADALP adds pairs into int32: exact, like the portable loop.
void matmul_i8_neon(const std::int8_t* w, const float* w_scale, const std::int32_t*, std::size_t rows,
                    std::size_t cols, QuantizedRows x, std::size_t n, float* y, std::size_t ldy) {
  for (std::size_t t = 0; t < n; ++t) {
    const std::int8_t* xt = x.xs + t * cols;
    for (std::size_t r = 0; r < rows; ++r) {
      const std::int8_t* wr = w + r * cols;
      int32x4_t a0 = vdupq_n_s32(0), a1 = a0;
      std::size_t c = 0;
      for (; c + 16 <= cols; c += 16) {
        const int8x16_t wv = vld1q_s8(wr + c), xv = vld1q_s8(xt + c);
        a0 = vpadalq_s16(a0, vmull_s8(vget_low_s8(wv), vget_low_s8(xv)));
        a1 = vpadalq_s16(a1, vmull_high_s8(wv, xv));
      }
      std::int32_t s = vaddvq_s32(vaddq_s32(a0, a1));
      for (; c < cols; ++c) s += std::int32_t{wr[c]} * std::int32_t{xt[c]};
      y[t * ldy + r] = static_cast<float>(s) * (w_scale[r] * x.scale[t]);
    }
  }
}

// Panels of 16 rows (pack_f32): four 4-lane accumulators per panel, four columns per x load
// (FMLA by lane), two panels per pass for eight independent FMA chains.
template <class W>
void matmul_packed_neon(const W* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                        float* y, std::size_t ldy) {
  const std::size_t panels = (rows + kPanelRows - 1) / kPanelRows;
  const std::size_t stride = kPanelRows * cols;
  for (std::size_t t = 0; t < n; ++t) {
    const float* xt = x + t * cols;
    float* yt = y + t * ldy;
    for (std::size_t q = 0; q < panels; ++q) {
      const W* pq = p + q * stride;
      float32x4_t a0 = vdupq_n_f32(0.0f), a1 = a0, a2 = a0, a3 = a0;
      std::size_t c = 0;
      for (; c + 4 <= cols; c += 4) {
        const float32x4_t xv = vld1q_f32(xt + c);
        const W* pc = pq + c * kPanelRows;
        a0 = vfmaq_laneq_f32(a0, load4(pc), xv, 0);
        a1 = vfmaq_laneq_f32(a1, load4(pc + 4), xv, 0);
        a2 = vfmaq_laneq_f32(a2, load4(pc + 8), xv, 0);
        a3 = vfmaq_laneq_f32(a3, load4(pc + 12), xv, 0);
        a0 = vfmaq_laneq_f32(a0, load4(pc + 16), xv, 1);
        a1 = vfmaq_laneq_f32(a1, load4(pc + 20), xv, 1);
        a2 = vfmaq_laneq_f32(a2, load4(pc + 24), xv, 1);
        a3 = vfmaq_laneq_f32(a3, load4(pc + 28), xv, 1);
        a0 = vfmaq_laneq_f32(a0, load4(pc + 32), xv, 2);
        a1 = vfmaq_laneq_f32(a1, load4(pc + 36), xv, 2);
        a2 = vfmaq_laneq_f32(a2, load4(pc + 40), xv, 2);
        a3 = vfmaq_laneq_f32(a3, load4(pc + 44), xv, 2);
        a0 = vfmaq_laneq_f32(a0, load4(pc + 48), xv, 3);
        a1 = vfmaq_laneq_f32(a1, load4(pc + 52), xv, 3);
        a2 = vfmaq_laneq_f32(a2, load4(pc + 56), xv, 3);
        a3 = vfmaq_laneq_f32(a3, load4(pc + 60), xv, 3);
      }
      for (; c < cols; ++c) {
        const float32x4_t xv = vdupq_n_f32(xt[c]);
        const W* pc = pq + c * kPanelRows;
        a0 = vfmaq_f32(a0, load4(pc), xv);
        a1 = vfmaq_f32(a1, load4(pc + 4), xv);
        a2 = vfmaq_f32(a2, load4(pc + 8), xv);
        a3 = vfmaq_f32(a3, load4(pc + 12), xv);
      }
      const std::size_t base = q * kPanelRows;
      const std::size_t valid = std::min(kPanelRows, rows - base);
      if (valid == kPanelRows) {
        vst1q_f32(yt + base, a0);
        vst1q_f32(yt + base + 4, a1);
        vst1q_f32(yt + base + 8, a2);
        vst1q_f32(yt + base + 12, a3);
      } else {
        float out[kPanelRows];
        vst1q_f32(out, a0);
        vst1q_f32(out + 4, a1);
        vst1q_f32(out + 8, a2);
        vst1q_f32(out + 12, a3);
        for (std::size_t r = 0; r < valid; ++r) yt[base + r] = out[r];
      }
    }
  }
}

void matmul_packed_f32_neon(const float* p, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                            float* y, std::size_t ldy) {
  matmul_packed_neon(p, rows, cols, x, n, y, ldy);
}
void matmul_packed_f16_neon(const std::uint16_t* p, std::size_t rows, std::size_t cols, const float* x,
                            std::size_t n, float* y, std::size_t ldy) {
  matmul_packed_neon(p, rows, cols, x, n, y, ldy);
}

// exp_approx four lanes at a time: the same range reduction and polynomial; floor by FCVTMS.
inline float32x4_t exp_neon(float32x4_t x) {
  x = vminq_f32(vmaxq_f32(x, vdupq_n_f32(-87.0f)), vdupq_n_f32(88.0f));
  const float32x4_t t = vaddq_f32(vmulq_f32(x, vdupq_n_f32(1.44269504088896341f)), vdupq_n_f32(0.5f));
  const int32x4_t n = vcvtmq_s32_f32(t);
  const float32x4_t fn = vcvtq_f32_s32(n);
  float32x4_t r = vsubq_f32(x, vmulq_f32(fn, vdupq_n_f32(0.693359375f)));
  r = vsubq_f32(r, vmulq_f32(fn, vdupq_n_f32(-2.12194440e-4f)));
  float32x4_t p = vdupq_n_f32(1.9875691500e-4f);
  p = vfmaq_f32(vdupq_n_f32(1.3981999507e-3f), p, r);
  p = vfmaq_f32(vdupq_n_f32(8.3334519073e-3f), p, r);
  p = vfmaq_f32(vdupq_n_f32(4.1665795894e-2f), p, r);
  p = vfmaq_f32(vdupq_n_f32(1.6666665459e-1f), p, r);
  p = vfmaq_f32(vdupq_n_f32(5.0000001201e-1f), p, r);
  p = vaddq_f32(vfmaq_f32(r, p, vmulq_f32(r, r)), vdupq_n_f32(1.0f));
  const int32x4_t bits = vshlq_n_s32(vaddq_s32(n, vdupq_n_s32(127)), 23);
  return vmulq_f32(p, vreinterpretq_f32_s32(bits));
}

void sigmoid_neon(float* x, std::size_t n) {
  const float32x4_t one = vdupq_n_f32(1.0f);
  std::size_t i = 0;
  for (; i + 4 <= n; i += 4) {
    const float32x4_t e = exp_neon(vnegq_f32(vld1q_f32(x + i)));
    vst1q_f32(x + i, vdivq_f32(one, vaddq_f32(one, e)));
  }
  sigmoid_loop(x + i, n - i);
}
void tanh_neon(float* x, std::size_t n) {
  const float32x4_t one = vdupq_n_f32(1.0f), two = vdupq_n_f32(2.0f);
  std::size_t i = 0;
  for (; i + 4 <= n; i += 4) {
    const float32x4_t e = exp_neon(vmulq_f32(vdupq_n_f32(-2.0f), vld1q_f32(x + i)));
    vst1q_f32(x + i, vsubq_f32(vdivq_f32(two, vaddq_f32(one, e)), one));
  }
  tanh_loop(x + i, n - i);
}

constexpr Kernels kNeon{"neon", matmul_i8_neon, sigmoid_neon, tanh_neon, matmul_packed_f32_neon, nullptr,
                        matmul_packed_f16_neon};

// ---- AArch64 SDOT (ARMv8.2 dot product) -------------------------------------------------------
// SDOT adds four signed byte products into each int32 lane, exact for |q| <= 127; signed x signed,
// so unlike VNNI no +128 offset and no w_sum correction.
#define GYRE_SDOT __attribute__((target("arch=armv8.2-a+dotprod")))

GYRE_SDOT void matmul_i8_sdot(const std::int8_t* w, const float* w_scale, const std::int32_t*,
                              std::size_t rows, std::size_t cols, QuantizedRows x, std::size_t n, float* y,
                              std::size_t ldy) {
  for (std::size_t t = 0; t < n; ++t) {
    const std::int8_t* xt = x.xs + t * cols;
    for (std::size_t r = 0; r < rows; ++r) {
      const std::int8_t* wr = w + r * cols;
      int32x4_t a0 = vdupq_n_s32(0), a1 = a0;
      std::size_t c = 0;
      for (; c + 32 <= cols; c += 32) {
        a0 = vdotq_s32(a0, vld1q_s8(wr + c), vld1q_s8(xt + c));
        a1 = vdotq_s32(a1, vld1q_s8(wr + c + 16), vld1q_s8(xt + c + 16));
      }
      for (; c + 16 <= cols; c += 16) a0 = vdotq_s32(a0, vld1q_s8(wr + c), vld1q_s8(xt + c));
      std::int32_t s = vaddvq_s32(vaddq_s32(a0, a1));
      for (; c < cols; ++c) s += std::int32_t{wr[c]} * std::int32_t{xt[c]};
      y[t * ldy + r] = static_cast<float>(s) * (w_scale[r] * x.scale[t]);
    }
  }
}

// Packed weights (pack_i8: per panel of 16 rows, groups of 4 columns, 16 bytes = 4 rows x 4
// columns per register): 16 activation bytes are loaded once and SDOT-by-lane picks the 4 bytes
// of one column group, so no horizontal sums are needed.
GYRE_SDOT void matmul_packed_i8_sdot(const std::int8_t* p, const float* w_scale, const std::int32_t*,
                                     std::size_t rows, std::size_t cols, QuantizedRows x, std::size_t n,
                                     float* y, std::size_t ldy) {
  const std::size_t panels = (rows + 15) / 16;
  const std::size_t groups = (cols + 3) / 4;
  const std::size_t stride = groups * 64;
  const std::size_t quads = cols / 16;  // runs of 4 full groups
  for (std::size_t t = 0; t < n; ++t) {
    const std::int8_t* xt = x.xs + t * cols;
    // The columns after the last full quad, zero-padded to 16 bytes (padded weights are 0 too).
    std::int8_t rest[16] = {};
    for (std::size_t c = quads * 16; c < cols; ++c) rest[c - quads * 16] = xt[c];
    const int8x16_t xr = vld1q_s8(rest);
    const std::size_t rest_groups = groups - quads * 4;
    const float xs = x.scale[t];
    for (std::size_t q = 0; q < panels; ++q) {
      const std::int8_t* pq = p + q * stride;
      int32x4_t a0 = vdupq_n_s32(0), a1 = a0, a2 = a0, a3 = a0;
      for (std::size_t g4 = 0; g4 < quads; ++g4) {
        const int8x16_t xv = vld1q_s8(xt + 16 * g4);
        const std::int8_t* pg = pq + g4 * 256;
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg), xv, 0);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 16), xv, 0);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 32), xv, 0);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 48), xv, 0);
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg + 64), xv, 1);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 80), xv, 1);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 96), xv, 1);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 112), xv, 1);
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg + 128), xv, 2);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 144), xv, 2);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 160), xv, 2);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 176), xv, 2);
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg + 192), xv, 3);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 208), xv, 3);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 224), xv, 3);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 240), xv, 3);
      }
      const std::int8_t* pg = pq + quads * 256;
      // Lane indices must be constants: one step per remaining group (at most 3 plus a partial one).
      if (rest_groups > 0) {
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg), xr, 0);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 16), xr, 0);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 32), xr, 0);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 48), xr, 0);
      }
      if (rest_groups > 1) {
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg + 64), xr, 1);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 80), xr, 1);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 96), xr, 1);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 112), xr, 1);
      }
      if (rest_groups > 2) {
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg + 128), xr, 2);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 144), xr, 2);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 160), xr, 2);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 176), xr, 2);
      }
      if (rest_groups > 3) {
        a0 = vdotq_laneq_s32(a0, vld1q_s8(pg + 192), xr, 3);
        a1 = vdotq_laneq_s32(a1, vld1q_s8(pg + 208), xr, 3);
        a2 = vdotq_laneq_s32(a2, vld1q_s8(pg + 224), xr, 3);
        a3 = vdotq_laneq_s32(a3, vld1q_s8(pg + 240), xr, 3);
      }
      // y = float(sum) * (w_scale * x_scale): the same expression as every other path.
      const std::size_t base = q * 16;
      float* yt = y + t * ldy + base;
      if (rows - base >= 16) {
        const float32x4_t xsv = vdupq_n_f32(xs);
        vst1q_f32(yt, vmulq_f32(vcvtq_f32_s32(a0), vmulq_f32(vld1q_f32(w_scale + base), xsv)));
        vst1q_f32(yt + 4, vmulq_f32(vcvtq_f32_s32(a1), vmulq_f32(vld1q_f32(w_scale + base + 4), xsv)));
        vst1q_f32(yt + 8, vmulq_f32(vcvtq_f32_s32(a2), vmulq_f32(vld1q_f32(w_scale + base + 8), xsv)));
        vst1q_f32(yt + 12, vmulq_f32(vcvtq_f32_s32(a3), vmulq_f32(vld1q_f32(w_scale + base + 12), xsv)));
      } else {
        std::int32_t sums[16];
        vst1q_s32(sums, a0);
        vst1q_s32(sums + 4, a1);
        vst1q_s32(sums + 8, a2);
        vst1q_s32(sums + 12, a3);
        for (std::size_t r = 0; r < rows - base; ++r)
          yt[r] = static_cast<float>(sums[r]) * (w_scale[base + r] * xs);
      }
    }
  }
}

constexpr Kernels kNeonSdot{"neon-sdot", matmul_i8_sdot, sigmoid_neon, tanh_neon,
                            matmul_packed_f32_neon, matmul_packed_i8_sdot, matmul_packed_f16_neon};
#endif  // GYRE_RUNTIME_ARM64

}  // namespace

#if defined(GYRE_RUNTIME_X86)
// F16C is CPUID leaf 1, ECX bit 29 (Intel SDM vol. 2A, CPUID); read directly because clang 14's
// __builtin_cpu_supports does not know "f16c".
static bool has_f16c() noexcept {
  unsigned eax = 0, ebx = 0, ecx = 0, edx = 0;
  return __get_cpuid(1, &eax, &ebx, &ecx, &edx) != 0 && (ecx & (1U << 29)) != 0;
}
#endif

bool isa_supported(Isa isa) noexcept {
  switch (isa) {
    case Isa::kPortable: return true;
#if defined(GYRE_RUNTIME_X86)
    case Isa::kAvx2:
      return __builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma") && has_f16c();
    case Isa::kAvx512:
      return isa_supported(Isa::kAvx2) && __builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512bw") &&
             __builtin_cpu_supports("avx512vl");
    case Isa::kAvx512Vnni: return isa_supported(Isa::kAvx512) && __builtin_cpu_supports("avx512vnni");
#elif defined(GYRE_RUNTIME_ARM64)
    case Isa::kNeon: return true;  // Advanced SIMD is part of the AArch64 base architecture
    case Isa::kNeonSdot: return (getauxval(AT_HWCAP) & HWCAP_ASIMDDP) != 0;
#endif
    default: return false;
  }
  return false;
}

const Kernels& kernels_for(Isa isa) noexcept {
#if defined(GYRE_RUNTIME_X86)
  switch (isa) {
    case Isa::kAvx2: return kAvx2;
    case Isa::kAvx512: return kAvx512;
    case Isa::kAvx512Vnni: return kAvx512Vnni;
    default: break;
  }
#elif defined(GYRE_RUNTIME_ARM64)
  switch (isa) {
    case Isa::kNeon: return kNeon;
    case Isa::kNeonSdot: return kNeonSdot;
    default: break;
  }
#else
  (void)isa;
#endif
  return kPortable;
}

Isa best_isa() noexcept {
  static const Isa chosen = [] {
    // x86 sets rank 1..3, AArch64 sets 4..5; a cap keeps to its own family (capping at "neon"
    // on x86 gives the portable loops, not AVX-512). Unknown names leave the choice free.
    Isa cap = Isa::kNeonSdot;
    bool capped = false;
    if (const char* env = std::getenv("GYRE_RUNTIME_ISA")) {
      const std::string_view v(env);
      capped = true;
      if (v == "portable") cap = Isa::kPortable;
      else if (v == "avx2") cap = Isa::kAvx2;
      else if (v == "avx512") cap = Isa::kAvx512;
      else if (v == "vnni") cap = Isa::kAvx512Vnni;
      else if (v == "neon") cap = Isa::kNeon;
      else if (v == "sdot") cap = Isa::kNeonSdot;
      else capped = false;
    }
    const bool cap_arm = cap >= Isa::kNeon;
    for (int i = static_cast<int>(cap); i > 0; --i) {
      const auto isa = static_cast<Isa>(i);
      if (capped && (isa >= Isa::kNeon) != cap_arm) continue;
      if (isa_supported(isa)) return isa;
    }
    return Isa::kPortable;
  }();
  return chosen;
}

const Kernels& best_kernels() noexcept { return kernels_for(best_isa()); }

template <class T>
void pack_panels(const T* w, std::size_t rows, std::size_t cols, T* out) noexcept {
  const std::size_t panels = (rows + kPanelRows - 1) / kPanelRows;
  for (std::size_t q = 0; q < panels; ++q)
    for (std::size_t c = 0; c < cols; ++c)
      for (std::size_t r = 0; r < kPanelRows; ++r) {
        const std::size_t row = q * kPanelRows + r;
        out[(q * cols + c) * kPanelRows + r] = row < rows ? w[row * cols + c] : T{0};
      }
}

void matmul_f32_reference(const float* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                          float* y, std::size_t ldy) noexcept {
  matmul_f32_portable(w, rows, cols, x, n, y, ldy);
}
void matmul_f16_reference(const std::uint16_t* w, std::size_t rows, std::size_t cols, const float* x, std::size_t n,
                          float* y, std::size_t ldy) noexcept {
  matmul_f16_portable(w, rows, cols, x, n, y, ldy);
}

void pack_f32(const float* w, std::size_t rows, std::size_t cols, float* out) noexcept { pack_panels(w, rows, cols, out); }
void pack_f16(const std::uint16_t* w, std::size_t rows, std::size_t cols, std::uint16_t* out) noexcept {
  pack_panels(w, rows, cols, out);  // half 0x0000 is +0.0
}

void pack_i8(const std::int8_t* w, std::size_t rows, std::size_t cols, std::int8_t* out) noexcept {
  const std::size_t panels = (rows + 15) / 16, groups = (cols + 3) / 4;
  for (std::size_t q = 0; q < panels; ++q)
    for (std::size_t g = 0; g < groups; ++g)
      for (std::size_t r = 0; r < 16; ++r)
        for (std::size_t k = 0; k < 4; ++k) {
          const std::size_t row = q * 16 + r, col = g * 4 + k;
          out[((q * groups + g) * 16 + r) * 4 + k] = row < rows && col < cols ? w[row * cols + col] : std::int8_t{0};
        }
}

// Rounding to nearest, ties to even (nearbyint in the default rounding mode, IEEE 754
// roundTiesToEven). With SSE4.1 it is roundps. Baseline x86-64 (SSE2) has no rounding instruction
// and nearbyintf is a library call (with fmaxf, 18% of an int8 call on Zen 3); there, adding and
// subtracting 1.5 * 2^23 leaves a sum whose unit in the last place is 1, rounded by the default
// mode: the same result for |v| < 2^22 (here |v| <= 127 and a little). SSE2 has no FMA, so that
// addition is never fused with the product before it. AArch64's nearbyint is one instruction.
#if defined(GYRE_RUNTIME_X86)
static_assert(FLT_EVAL_METHOD == 0, "the SSE2 rounding needs float additions in float precision");
inline __m128 round_even4(__m128 v) {
#if defined(__SSE4_1__)
  return _mm_round_ps(v, _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC);
#else
  const __m128 magic = _mm_set1_ps(12582912.0f);  // 1.5 * 2^23
  return _mm_sub_ps(_mm_add_ps(v, magic), magic);
#endif
}
#endif

void quantize_rows(const float* x, std::size_t n, std::size_t cols, std::int8_t* xs, std::uint8_t* xu,
                   float* scale) noexcept {
  for (std::size_t t = 0; t < n; ++t) {
    const float* xt = x + t * cols;
    float max_abs = 0.0f;
    std::size_t c = 0;
#if defined(GYRE_RUNTIME_X86)
    // maxps(a, m) is a > m ? a : m per lane, as the scalar loop below (a NaN is passed over).
    const __m128 abs_mask = _mm_castsi128_ps(_mm_set1_epi32(0x7FFFFFFF));
    __m128 m = _mm_setzero_ps();
    for (; c + 4 <= cols; c += 4) m = _mm_max_ps(_mm_and_ps(abs_mask, _mm_loadu_ps(xt + c)), m);
    m = _mm_max_ps(m, _mm_movehl_ps(m, m));
    m = _mm_max_ss(m, _mm_shuffle_ps(m, m, 1));
    max_abs = _mm_cvtss_f32(m);
#endif
    for (; c < cols; ++c) {
      const float a = std::fabs(xt[c]);
      max_abs = a > max_abs ? a : max_abs;
    }
    const float s = max_abs / 127.0f;
    const float inv = s > 0.0f ? 1.0f / s : 0.0f;
    scale[t] = s;
    std::int8_t* st = xs + t * cols;
    std::uint8_t* ut = xu + t * cols;
    c = 0;
#if defined(GYRE_RUNTIME_X86)
    const __m128 iv = _mm_set1_ps(inv), lo = _mm_set1_ps(-127.0f), hi = _mm_set1_ps(127.0f);
    for (; c + 4 <= cols; c += 4) {
      const __m128 q = _mm_min_ps(_mm_max_ps(round_even4(_mm_mul_ps(_mm_loadu_ps(xt + c), iv)), lo), hi);
      const __m128i w16 = _mm_packs_epi32(_mm_cvttps_epi32(q), _mm_setzero_si128());
      const __m128i b8 = _mm_packs_epi16(w16, w16);
      const auto sb = static_cast<std::uint32_t>(_mm_cvtsi128_si32(b8));
      const std::uint32_t ub = sb ^ 0x80808080U;  // q + 128 per byte
      std::memcpy(st + c, &sb, 4);
      std::memcpy(ut + c, &ub, 4);
    }
#endif
    for (; c < cols; ++c) {
      float q = std::nearbyint(xt[c] * inv);
      q = q > 127.0f ? 127.0f : (q < -127.0f ? -127.0f : q);
      const auto qi = static_cast<std::int8_t>(q);
      st[c] = qi;
      ut[c] = static_cast<std::uint8_t>(static_cast<int>(qi) + 128);
    }
  }
}

}  // namespace gyre::runtime::detail
