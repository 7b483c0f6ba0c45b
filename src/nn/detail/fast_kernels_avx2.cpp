// AVX2+FMA training kernels (fast_kernels_avx2.hpp). Every function carries a target attribute,
// so this file builds for plain x86-64; fast_kernels.cpp calls it only on CPUs with AVX2 and FMA.
//
// Register tiles (16 ymm registers, against AVX-512's 32 zmm): the general GEMM walks each
// 32-column panel of packed B (the AVX-512 path's layout) as two halves of 16 columns, 6 rows x 2
// vectors of accumulators, on A copied into 6-row groups (pack_a); the fused LSTM step takes each
// 16-unit gate panel as two sub-panels of 8 units, 3 rows x 4 gates, the GRU step 4 rows x 3 gates,
// on U packed into those sub-panels (pack_gates_panels at the end of this file).

#include "fast_kernels_avx2.hpp"

#include <algorithm>
#include <cstdint>
#include <memory>
#include <new>

#include "fast_kernels.hpp"

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <immintrin.h>

#define GYRE_AVX2 __attribute__((target("avx2,fma")))
#define GYRE_AVX2_INLINE __attribute__((target("avx2,fma"), always_inline)) inline
// The backward element-wise parts round every product and sum on its own, as the portable path's
// Eigen expressions do (see GYRE_AVX512_EXACT in fast_kernels.cpp).
#if defined(__clang__)
#define GYRE_AVX2_EXACT GYRE_AVX2
#else
#define GYRE_AVX2_EXACT GYRE_AVX2 __attribute__((optimize("fp-contract=off")))
#endif

namespace gyre::nn::detail::fast::avx2 {

namespace {

// ---- activations (the AVX-512 path's formulas, fast_kernels.cpp) --------------------------------
// e^x after Cephes expf: n = round(x log2 e), r = x - n ln2 (ln2 in two parts), e^r by a degree-6
// polynomial, times 2^n. AVX2 has no vscalefps: 2^n is applied as two exact powers of two,
// 2^(n >> 1) and 2^(n - (n >> 1)), each a normal float for |n| <= 128, so only the last product
// rounds, as vscalefps rounds once.
GYRE_AVX2_INLINE __m256 exp256(__m256 x) {
  x = _mm256_max_ps(_mm256_min_ps(x, _mm256_set1_ps(88.3762626647949f)), _mm256_set1_ps(-87.3365447504f));
  const __m256 n = _mm256_round_ps(_mm256_mul_ps(x, _mm256_set1_ps(1.44269504088896341f)),
                                   _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC);
  __m256 r = _mm256_fnmadd_ps(n, _mm256_set1_ps(0.693359375f), x);
  r = _mm256_fnmadd_ps(n, _mm256_set1_ps(-2.12194440e-4f), r);
  __m256 y = _mm256_set1_ps(1.9875691500e-4f);
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(1.3981999507e-3f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(8.3334519073e-3f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(4.1665795894e-2f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(1.6666665459e-1f));
  y = _mm256_fmadd_ps(y, r, _mm256_set1_ps(5.0000001201e-1f));
  y = _mm256_fmadd_ps(y, _mm256_mul_ps(r, r), _mm256_add_ps(r, _mm256_set1_ps(1.0f)));
  const __m256i ni = _mm256_cvtps_epi32(n);
  const __m256i n1 = _mm256_srai_epi32(ni, 1);
  const __m256i n2 = _mm256_sub_epi32(ni, n1);
  const __m256i bias = _mm256_set1_epi32(127);
  const __m256 p1 = _mm256_castsi256_ps(_mm256_slli_epi32(_mm256_add_epi32(n1, bias), 23));
  const __m256 p2 = _mm256_castsi256_ps(_mm256_slli_epi32(_mm256_add_epi32(n2, bias), 23));
  return _mm256_mul_ps(_mm256_mul_ps(y, p1), p2);
}

GYRE_AVX2_INLINE __m256 sigmoid256(__m256 x) {
  const __m256 one = _mm256_set1_ps(1.0f);
  return _mm256_div_ps(one, _mm256_add_ps(one, exp256(_mm256_sub_ps(_mm256_setzero_ps(), x))));
}

// tanh after Cephes tanhf: |x| < 0.625: x + x^3 P(x^2); else sign(x) (1 - 2 / (e^{2|x|} + 1)).
GYRE_AVX2_INLINE __m256 tanh256(__m256 x) {
  const __m256 sign = _mm256_set1_ps(-0.0f);
  const __m256 ax = _mm256_andnot_ps(sign, x);
  const __m256 one = _mm256_set1_ps(1.0f);
  const __m256 e = exp256(_mm256_add_ps(ax, ax));
  __m256 big = _mm256_sub_ps(one, _mm256_div_ps(_mm256_set1_ps(2.0f), _mm256_add_ps(e, one)));
  big = _mm256_or_ps(big, _mm256_and_ps(x, sign));
  const __m256 z = _mm256_mul_ps(x, x);
  __m256 p = _mm256_set1_ps(-5.70498872745e-3f);
  p = _mm256_fmadd_ps(p, z, _mm256_set1_ps(2.06390887954e-2f));
  p = _mm256_fmadd_ps(p, z, _mm256_set1_ps(-5.37397155531e-2f));
  p = _mm256_fmadd_ps(p, z, _mm256_set1_ps(1.33314422036e-1f));
  p = _mm256_fmadd_ps(p, z, _mm256_set1_ps(-3.33332819422e-1f));
  const __m256 small = _mm256_fmadd_ps(_mm256_mul_ps(p, z), x, x);
  return _mm256_blendv_ps(big, small, _mm256_cmp_ps(ax, _mm256_set1_ps(0.625f), _CMP_LT_OQ));
}

// Lanes [0, cols) of a vector (all when cols >= 8, none when cols <= 0), for maskload/maskstore.
GYRE_AVX2_INLINE __m256i cols_mask(std::ptrdiff_t cols) {
  const int c = static_cast<int>(std::clamp<std::ptrdiff_t>(cols, 0, 8));
  return _mm256_cmpgt_epi32(_mm256_set1_epi32(c), _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7));
}

// Loads and stores of lanes [0, 8) when Full, else of the lanes set in m: vmaskmovps only for the
// last, partial vector of a row (its store form is slow on some CPUs).
template <bool Full>
GYRE_AVX2_INLINE __m256 load(const float* p, __m256i m) {
  if constexpr (Full) {
    (void)m;
    return _mm256_loadu_ps(p);
  } else {
    return _mm256_maskload_ps(p, m);
  }
}
template <bool Full>
GYRE_AVX2_INLINE void store(float* p, __m256i m, __m256 x) {
  if constexpr (Full) {
    (void)m;
    _mm256_storeu_ps(p, x);
  } else {
    _mm256_maskstore_ps(p, m, x);
  }
}

// ---- micro-kernel -----------------------------------------------------------------------------
// acc[r][v] = sum_kk A(r, kk) * Bp[kk * ldb + 8v .. 8v + 7] for an M x (8 NV) tile; A(r, kk) as in
// the AVX-512 tile (row-major, or stored transposed). One FMA chain per accumulator, kk in order.
template <int M, int NV, bool TransA>
GYRE_AVX2_INLINE void tile(std::ptrdiff_t k, const float* a, std::ptrdiff_t lda, const float* bp,
                           std::ptrdiff_t ldb, __m256 (&acc)[M][NV]) {
  // Sums in locals indexed by constants only, copied out at the end: accumulators the caller
  // indexes at run time would otherwise live in memory, stored on every k.
  __m256 s[M][NV];
#pragma GCC unroll 8
  for (int r = 0; r < M; ++r)
#pragma GCC unroll 4
    for (int v = 0; v < NV; ++v) s[r][v] = _mm256_setzero_ps();
  for (std::ptrdiff_t kk = 0; kk < k; ++kk) {
    __m256 b[NV];
#pragma GCC unroll 4
    for (int v = 0; v < NV; ++v) b[v] = _mm256_loadu_ps(bp + kk * ldb + 8 * v);
#pragma GCC unroll 8
    for (int r = 0; r < M; ++r) {
      const __m256 av = _mm256_broadcast_ss(TransA ? a + kk * lda + r : a + r * lda + kk);
#pragma GCC unroll 4
      for (int v = 0; v < NV; ++v) s[r][v] = _mm256_fmadd_ps(av, b[v], s[r][v]);
    }
  }
#pragma GCC unroll 8
  for (int r = 0; r < M; ++r)
#pragma GCC unroll 4
    for (int v = 0; v < NV; ++v) acc[r][v] = s[r][v];
}

// General GEMM on half a panel (16 columns, `cols` of them valid): C (+)= acc, then + bias[col]
// when bias is given (two roundings, as the AVX-512 path).
template <int M, bool TransA>
GYRE_AVX2 void gemm_tile(std::ptrdiff_t k, const float* a, std::ptrdiff_t lda, const float* bp, float* c,
                         std::ptrdiff_t ldc, std::ptrdiff_t cols, bool accumulate, const float* bias) {
  __m256 acc[M][2];
  tile<M, 2, TransA>(k, a, lda, bp, kGemmNr, acc);
  if (cols == 16) {
    __m256 bv[2];
    for (int v = 0; v < 2; ++v) bv[v] = bias != nullptr ? _mm256_loadu_ps(bias + 8 * v) : _mm256_setzero_ps();
#pragma GCC unroll 8
    for (int r = 0; r < M; ++r)
#pragma GCC unroll 2
      for (int v = 0; v < 2; ++v) {
        float* p = c + r * ldc + 8 * v;
        __m256 out = accumulate ? _mm256_add_ps(_mm256_loadu_ps(p), acc[r][v]) : acc[r][v];
        if (bias != nullptr) out = _mm256_add_ps(out, bv[v]);
        _mm256_storeu_ps(p, out);
      }
    return;
  }
#pragma GCC unroll 2
  for (int v = 0; v < 2; ++v) {
    const __m256i m = cols_mask(cols - 8 * v);
    const __m256 bv = bias != nullptr ? _mm256_maskload_ps(bias + 8 * v, m) : _mm256_setzero_ps();
#pragma GCC unroll 8
    for (int r = 0; r < M; ++r) {
      float* p = c + r * ldc + 8 * v;
      __m256 out = accumulate ? _mm256_add_ps(_mm256_maskload_ps(p, m), acc[r][v]) : acc[r][v];
      if (bias != nullptr) out = _mm256_add_ps(out, bv);
      _mm256_maskstore_ps(p, m, out);
    }
  }
}

constexpr int kGemmMr = 6;

// A block of A [mb x kb] copied into groups of kGemmMr rows, each group as kb runs of kAStride
// floats (row r of the group at r; lanes past the group's rows unspecified, rows past mb zero):
// the tiles then read A in order, one line after another, whatever A's row stride. Strided reads of
// A cost up to 40% on the layers' shapes: with a stride of 4H floats = 4 KB (LSTM, H 256) every row
// of A falls in the same L1 set. A run is one whole vector so that packing stores whole vectors.
constexpr std::ptrdiff_t kAStride = 8;

// In-register transpose of an 8 x 8 block (r[i] lane j <-> r[j] lane i).
GYRE_AVX2_INLINE void transpose8(__m256 (&r)[8]) {
  __m256 t[8];
  for (int i = 0; i < 8; i += 2) {
    t[i] = _mm256_unpacklo_ps(r[i], r[i + 1]);
    t[i + 1] = _mm256_unpackhi_ps(r[i], r[i + 1]);
  }
  __m256 u[8];
  for (int i = 0; i < 8; i += 4) {
    u[i] = _mm256_shuffle_ps(t[i], t[i + 2], _MM_SHUFFLE(1, 0, 1, 0));
    u[i + 1] = _mm256_shuffle_ps(t[i], t[i + 2], _MM_SHUFFLE(3, 2, 3, 2));
    u[i + 2] = _mm256_shuffle_ps(t[i + 1], t[i + 3], _MM_SHUFFLE(1, 0, 1, 0));
    u[i + 3] = _mm256_shuffle_ps(t[i + 1], t[i + 3], _MM_SHUFFLE(3, 2, 3, 2));
  }
  for (int i = 0; i < 4; ++i) {
    r[i] = _mm256_permute2f128_ps(u[i], u[i + 4], 0x20);
    r[i + 4] = _mm256_permute2f128_ps(u[i], u[i + 4], 0x31);
  }
}

template <bool TransA>
GYRE_AVX2 void pack_a(const float* a, std::ptrdiff_t lda, std::ptrdiff_t mb, std::ptrdiff_t kb, float* out) {
  const std::ptrdiff_t groups = (mb + kGemmMr - 1) / kGemmMr;
  if constexpr (TransA) {
    // A(r, kk) = a[kk * lda + r]: row kk of the storage, read once, feeds every group.
    for (std::ptrdiff_t kk = 0; kk < kb; ++kk) {
      const float* src = a + kk * lda;
      for (std::ptrdiff_t g = 0; g < groups; ++g) {
        const std::ptrdiff_t r0 = g * kGemmMr;
        float* dst = out + (g * kb + kk) * kAStride;
        if (r0 + kAStride <= mb)
          _mm256_storeu_ps(dst, _mm256_loadu_ps(src + r0));
        else
          _mm256_storeu_ps(
              dst, _mm256_maskload_ps(src + r0, cols_mask(std::min(mb - r0, std::ptrdiff_t{kGemmMr}))));
      }
    }
  } else {
    for (std::ptrdiff_t g = 0; g < groups; ++g) {
      const std::ptrdiff_t r0 = g * kGemmMr, rows = std::min<std::ptrdiff_t>(kGemmMr, mb - r0);
      float* dst = out + g * kb * kAStride;
      std::ptrdiff_t kk = 0;
      for (; kk + 8 <= kb; kk += 8) {
        __m256 r[8];
        for (int i = 0; i < 8; ++i)
          r[i] = i < rows ? _mm256_loadu_ps(a + (r0 + i) * lda + kk) : _mm256_setzero_ps();
        transpose8(r);
        for (int i = 0; i < 8; ++i) _mm256_storeu_ps(dst + (kk + i) * kAStride, r[i]);
      }
      for (; kk < kb; ++kk)
        for (std::ptrdiff_t i = 0; i < kGemmMr; ++i)
          dst[kk * kAStride + i] = i < rows ? a[(r0 + i) * lda + kk] : 0.0f;
    }
  }
}

// Rows of a packed A block (pack_a) against half a panel.
GYRE_AVX2 void gemm_rows(std::ptrdiff_t rows, std::ptrdiff_t k, const float* ap, const float* bp, float* c,
                         std::ptrdiff_t ldc, std::ptrdiff_t cols, bool accumulate, const float* bias) {
  std::ptrdiff_t r = 0;
  for (; r + kGemmMr <= rows; r += kGemmMr)
    gemm_tile<kGemmMr, true>(k, ap + r / kGemmMr * k * kAStride, kAStride, bp, c + r * ldc, ldc, cols,
                             accumulate, bias);
  const float* ar = ap + r / kGemmMr * k * kAStride;
  float* cr = c + r * ldc;
  switch (rows - r) {
    case 1:
      gemm_tile<1, true>(k, ar, kAStride, bp, cr, ldc, cols, accumulate, bias);
      break;
    case 2:
      gemm_tile<2, true>(k, ar, kAStride, bp, cr, ldc, cols, accumulate, bias);
      break;
    case 3:
      gemm_tile<3, true>(k, ar, kAStride, bp, cr, ldc, cols, accumulate, bias);
      break;
    case 4:
      gemm_tile<4, true>(k, ar, kAStride, bp, cr, ldc, cols, accumulate, bias);
      break;
    case 5:
      gemm_tile<5, true>(k, ar, kAStride, bp, cr, ldc, cols, accumulate, bias);
      break;
    default:
      break;
  }
}

// The packed A block of this thread (kGemmMc x kGemmKc, in whole groups of kAStride floats a k),
// allocated on the thread's first product and kept: no allocation per product.
float* a_block() {
  struct Free {
    void operator()(float* p) const noexcept { ::operator delete (p, std::align_val_t{64}); }
  };
  constexpr std::size_t size =
      static_cast<std::size_t>((kGemmMc + kGemmMr - 1) / kGemmMr * kAStride) * kGemmKc;
  thread_local const std::unique_ptr<float, Free> block(
      static_cast<float*>(::operator new (size * sizeof(float), std::align_val_t{64})));
  return block.get();
}

template <bool TransA>
GYRE_AVX2 void gemm(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a, std::ptrdiff_t lda,
                    const float* bp, float* c, std::ptrdiff_t ldc, bool accumulate, const float* bias) {
  const std::ptrdiff_t panels = (n + kGemmNr - 1) / kGemmNr;
  float* ap = a_block();
  for (std::ptrdiff_t pc = 0; pc < k; pc += kGemmKc) {
    const std::ptrdiff_t kb = std::min<std::ptrdiff_t>(kGemmKc, k - pc);
    const bool acc = accumulate || pc > 0;
    const bool last = pc + kb >= k;  // the bias goes onto the finished sum
    for (std::ptrdiff_t ic = 0; ic < m; ic += kGemmMc) {
      const std::ptrdiff_t mb = std::min<std::ptrdiff_t>(kGemmMc, m - ic);
      pack_a<TransA>(TransA ? a + pc * lda + ic : a + ic * lda + pc, lda, mb, kb, ap);
      for (std::ptrdiff_t p = 0; p < panels; ++p) {
        const float* bpan = bp + p * kGemmNr * k + pc * kGemmNr;
        for (std::ptrdiff_t half = 0; half < 2; ++half) {
          const std::ptrdiff_t col0 = p * kGemmNr + 16 * half;
          if (col0 >= n) break;
          gemm_rows(mb, kb, ap, bpan + 16 * half, c + ic * ldc + col0, ldc,
                    std::min<std::ptrdiff_t>(16, n - col0), acc,
                    last && bias != nullptr ? bias + col0 : nullptr);
        }
      }
    }
  }
}

// ---- fused LSTM step --------------------------------------------------------------------------
constexpr int kCellKc = 256;  // as the AVX-512 path's
constexpr int kLstmMr = 3;
static_assert(kCellUnits == 2 * kAvx2CellUnits, "each gate panel is two AVX2 sub-panels");

// Rows of the sub-panel of units [u0, u0 + 8): bp points at the sub-panel's k-block; its packed
// rows are 32 floats (4 gates x 8 units, pack_gates's AVX2 layout), gate g at + 8 g.
template <int M>
GYRE_AVX2 void lstm_tile(std::ptrdiff_t kb, bool last, std::ptrdiff_t H, const float* hp, std::ptrdiff_t ld,
                         const float* bp, std::ptrdiff_t u0, const float* cp, float* gates, float* c_out,
                         float* tanh_c_out, float* h_out) {
  constexpr std::ptrdiff_t nr = 4 * kAvx2CellUnits;
  __m256 acc[M][4];
#pragma GCC unroll 4
  for (int r = 0; r < M; ++r)
#pragma GCC unroll 4
    for (int v = 0; v < 4; ++v) acc[r][v] = _mm256_setzero_ps();
  for (std::ptrdiff_t kk = 0; kk < kb; ++kk) {
    __m256 b[4];
#pragma GCC unroll 4
    for (int v = 0; v < 4; ++v) b[v] = _mm256_loadu_ps(bp + kk * nr + v * kAvx2CellUnits);
#pragma GCC unroll 4
    for (int r = 0; r < M; ++r) {
      const __m256 av = _mm256_broadcast_ss(hp + r * ld + kk);
#pragma GCC unroll 4
      for (int v = 0; v < 4; ++v) acc[r][v] = _mm256_fmadd_ps(av, b[v], acc[r][v]);
    }
  }
#pragma GCC unroll 4
  for (int r = 0; r < M; ++r) {
    float* g = gates + r * 4 * H + u0;
    __m256 pre[4];
#pragma GCC unroll 4
    for (int v = 0; v < 4; ++v) pre[v] = _mm256_add_ps(_mm256_loadu_ps(g + v * H), acc[r][v]);
    if (!last) {
#pragma GCC unroll 4
      for (int v = 0; v < 4; ++v) _mm256_storeu_ps(g + v * H, pre[v]);
      continue;
    }
    const __m256 i = sigmoid256(pre[0]), f = sigmoid256(pre[1]), gg = tanh256(pre[2]), o = sigmoid256(pre[3]);
    const __m256 c = _mm256_fmadd_ps(f, _mm256_loadu_ps(cp + r * ld + u0), _mm256_mul_ps(i, gg));
    const __m256 tc = tanh256(c);
    _mm256_storeu_ps(g, i);
    _mm256_storeu_ps(g + H, f);
    _mm256_storeu_ps(g + 2 * H, gg);
    _mm256_storeu_ps(g + 3 * H, o);
    _mm256_storeu_ps(c_out + r * H + u0, c);
    _mm256_storeu_ps(tanh_c_out + r * H + u0, tc);
    _mm256_storeu_ps(h_out + r * H + u0, _mm256_mul_ps(o, tc));
  }
}

}  // namespace

GYRE_AVX2 void lstm_step(std::ptrdiff_t n, std::ptrdiff_t H, const float* h_prev, const float* c_prev,
                         std::ptrdiff_t ld, const float* up, float* gates, float* c_out, float* tanh_c_out,
                         float* h_out) {
  constexpr std::ptrdiff_t nr = 4 * kCellUnits;
  const std::ptrdiff_t panels = H / kCellUnits;
  for (std::ptrdiff_t pc = 0; pc < H; pc += kCellKc) {
    const std::ptrdiff_t kb = std::min<std::ptrdiff_t>(kCellKc, H - pc);
    const bool last = pc + kb >= H;
    for (std::ptrdiff_t p = 0; p < panels; ++p)
      for (std::ptrdiff_t half = 0; half < 2; ++half) {
        const float* bp = up + p * nr * H + half * (nr / 2) * H + pc * (nr / 2);
        const std::ptrdiff_t u0 = p * kCellUnits + kAvx2CellUnits * half;
        std::ptrdiff_t r = 0;
        for (; r + kLstmMr <= n; r += kLstmMr)
          lstm_tile<kLstmMr>(kb, last, H, h_prev + r * ld + pc, ld, bp, u0, c_prev + r * ld,
                             gates + r * 4 * H, c_out + r * H, tanh_c_out + r * H, h_out + r * H);
        if (n - r == 1)
          lstm_tile<1>(kb, last, H, h_prev + r * ld + pc, ld, bp, u0, c_prev + r * ld, gates + r * 4 * H,
                       c_out + r * H, tanh_c_out + r * H, h_out + r * H);
        else if (n - r == 2)
          lstm_tile<2>(kb, last, H, h_prev + r * ld + pc, ld, bp, u0, c_prev + r * ld, gates + r * 4 * H,
                       c_out + r * H, tanh_c_out + r * H, h_out + r * H);
      }
  }
}

// ---- fused GRU step ---------------------------------------------------------------------------
namespace {

constexpr int kGruMr = 4;

template <int M>
GYRE_AVX2 void gru_tile(std::ptrdiff_t kb, bool first, bool last, std::ptrdiff_t H, const float* hp_k,
                        const float* hp, std::ptrdiff_t ld, const float* bp, std::ptrdiff_t u0,
                        const float* bh, float* gates, float* hn_out, float* h_out) {
  constexpr std::ptrdiff_t nr = 3 * kAvx2CellUnits;
  __m256 acc[M][3];
#pragma GCC unroll 4
  for (int r = 0; r < M; ++r)
#pragma GCC unroll 3
    for (int v = 0; v < 3; ++v) acc[r][v] = _mm256_setzero_ps();
  for (std::ptrdiff_t kk = 0; kk < kb; ++kk) {
    __m256 b[3];
#pragma GCC unroll 3
    for (int v = 0; v < 3; ++v) b[v] = _mm256_loadu_ps(bp + kk * nr + v * kAvx2CellUnits);
#pragma GCC unroll 4
    for (int r = 0; r < M; ++r) {
      const __m256 av = _mm256_broadcast_ss(hp_k + r * ld + kk);
#pragma GCC unroll 3
      for (int v = 0; v < 3; ++v) acc[r][v] = _mm256_fmadd_ps(av, b[v], acc[r][v]);
    }
  }
  const __m256 bh_r = _mm256_loadu_ps(bh + u0), bh_z = _mm256_loadu_ps(bh + H + u0),
               bh_n = _mm256_loadu_ps(bh + 2 * H + u0);
#pragma GCC unroll 4
  for (int r = 0; r < M; ++r) {
    float* g = gates + r * 3 * H + u0;
    float* hn = hn_out + r * H + u0;
    // Partial sums of earlier k blocks: r, z in the gate rows; U[h~] h in hn_out.
    const __m256 sr = acc[r][0], sz = acc[r][1];
    const __m256 sn = first ? acc[r][2] : _mm256_add_ps(_mm256_loadu_ps(hn), acc[r][2]);
    if (!last) {
      _mm256_storeu_ps(g, _mm256_add_ps(_mm256_loadu_ps(g), sr));
      _mm256_storeu_ps(g + H, _mm256_add_ps(_mm256_loadu_ps(g + H), sz));
      _mm256_storeu_ps(hn, sn);
      continue;
    }
    const __m256 rg = sigmoid256(_mm256_add_ps(_mm256_loadu_ps(g), _mm256_add_ps(sr, bh_r)));
    const __m256 zg = sigmoid256(_mm256_add_ps(_mm256_loadu_ps(g + H), _mm256_add_ps(sz, bh_z)));
    const __m256 hnv = _mm256_add_ps(sn, bh_n);
    const __m256 ng = tanh256(_mm256_fmadd_ps(rg, hnv, _mm256_loadu_ps(g + 2 * H)));
    const __m256 h_old = _mm256_loadu_ps(hp + r * ld + u0);
    // h' = (1 - z) n + z h
    const __m256 h_new =
        _mm256_fmadd_ps(_mm256_sub_ps(_mm256_set1_ps(1.0f), zg), ng, _mm256_mul_ps(zg, h_old));
    _mm256_storeu_ps(g, rg);
    _mm256_storeu_ps(g + H, zg);
    _mm256_storeu_ps(g + 2 * H, ng);
    _mm256_storeu_ps(hn, hnv);
    _mm256_storeu_ps(h_out + r * H + u0, h_new);
  }
}

}  // namespace

GYRE_AVX2 void gru_step(std::ptrdiff_t n, std::ptrdiff_t H, const float* h_prev, std::ptrdiff_t ld,
                        const float* up, const float* bh, float* gates, float* hn_out, float* h_out) {
  constexpr std::ptrdiff_t nr = 3 * kCellUnits;
  const std::ptrdiff_t panels = H / kCellUnits;
  for (std::ptrdiff_t pc = 0; pc < H; pc += kCellKc) {
    const std::ptrdiff_t kb = std::min<std::ptrdiff_t>(kCellKc, H - pc);
    const bool first = pc == 0, last = pc + kb >= H;
    for (std::ptrdiff_t p = 0; p < panels; ++p)
      for (std::ptrdiff_t half = 0; half < 2; ++half) {
        const float* bp = up + p * nr * H + half * (nr / 2) * H + pc * (nr / 2);
        const std::ptrdiff_t u0 = p * kCellUnits + kAvx2CellUnits * half;
        std::ptrdiff_t r = 0;
        for (; r + kGruMr <= n; r += kGruMr)
          gru_tile<kGruMr>(kb, first, last, H, h_prev + r * ld + pc, h_prev + r * ld, ld, bp, u0, bh,
                           gates + r * 3 * H, hn_out + r * H, h_out + r * H);
        const float* hk = h_prev + r * ld + pc;
        const float* hp = h_prev + r * ld;
        float* g = gates + r * 3 * H;
        switch (n - r) {
          case 1:
            gru_tile<1>(kb, first, last, H, hk, hp, ld, bp, u0, bh, g, hn_out + r * H, h_out + r * H);
            break;
          case 2:
            gru_tile<2>(kb, first, last, H, hk, hp, ld, bp, u0, bh, g, hn_out + r * H, h_out + r * H);
            break;
          case 3:
            gru_tile<3>(kb, first, last, H, hk, hp, ld, bp, u0, bh, g, hn_out + r * H, h_out + r * H);
            break;
          default:
            break;
        }
      }
  }
}

GYRE_AVX2 void gemm_packed(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a,
                           std::ptrdiff_t lda, bool trans_a, const float* bp, float* c, std::ptrdiff_t ldc,
                           bool accumulate, const float* bias) {
  if (trans_a)
    gemm<true>(m, n, k, a, lda, bp, c, ldc, accumulate, bias);
  else
    gemm<false>(m, n, k, a, lda, bp, c, ldc, accumulate, bias);
}

// ---- backward element-wise parts (formulas and rounding of fast_kernels.hpp) -------------------
namespace {

// Units [u, u + 8) of one row (those set in m unless Full).
template <bool Full>
GYRE_AVX2_EXACT void lstm_back_units(std::ptrdiff_t H, std::ptrdiff_t u, __m256i m, const float* dhr,
                                     const float* dor, float* dcr, const float* a, const float* tcr,
                                     const float* cpr, float* dg) {
  const __m256 one = _mm256_set1_ps(1.0f);
  __m256 dH = load<Full>(dhr + u, m);
  if (dor != nullptr) dH = _mm256_add_ps(dH, load<Full>(dor + u, m));
  const __m256 i = load<Full>(a + u, m), f = load<Full>(a + H + u, m), g = load<Full>(a + 2 * H + u, m),
               o = load<Full>(a + 3 * H + u, m), tc = load<Full>(tcr + u, m);
  // dc += dh o (1 - tc^2)
  const __m256 dC = _mm256_add_ps(
      load<Full>(dcr + u, m), _mm256_mul_ps(_mm256_mul_ps(dH, o), _mm256_sub_ps(one, _mm256_mul_ps(tc, tc))));
  // d_i = dc g i (1 - i); d_f = dc c_prev f (1 - f); d_g = dc i (1 - g^2); d_o = dh tc o (1 - o)
  store<Full>(dg + u, m, _mm256_mul_ps(_mm256_mul_ps(_mm256_mul_ps(dC, g), i), _mm256_sub_ps(one, i)));
  store<Full>(
      dg + H + u, m,
      _mm256_mul_ps(_mm256_mul_ps(_mm256_mul_ps(dC, load<Full>(cpr + u, m)), f), _mm256_sub_ps(one, f)));
  store<Full>(dg + 2 * H + u, m,
              _mm256_mul_ps(_mm256_mul_ps(dC, i), _mm256_sub_ps(one, _mm256_mul_ps(g, g))));
  store<Full>(dg + 3 * H + u, m,
              _mm256_mul_ps(_mm256_mul_ps(_mm256_mul_ps(dH, tc), o), _mm256_sub_ps(one, o)));
  store<Full>(dcr + u, m, _mm256_mul_ps(dC, f));
}

template <bool Full>
GYRE_AVX2_EXACT void gru_back_units(std::ptrdiff_t H, std::ptrdiff_t u, __m256i m, float* dhr,
                                    const float* dor, const float* a, const float* hnr, const float* hpr,
                                    float* gi, float* gh) {
  const __m256 one = _mm256_set1_ps(1.0f);
  __m256 dH = load<Full>(dhr + u, m);
  if (dor != nullptr) dH = _mm256_add_ps(dH, load<Full>(dor + u, m));
  const __m256 rg = load<Full>(a + u, m), z = load<Full>(a + H + u, m), nn = load<Full>(a + 2 * H + u, m);
  // d_n = dh (1 - z)(1 - n^2); d_r = d_n hn r (1 - r); d_z = dh (h_prev - n) z (1 - z)
  const __m256 dn =
      _mm256_mul_ps(_mm256_mul_ps(dH, _mm256_sub_ps(one, z)), _mm256_sub_ps(one, _mm256_mul_ps(nn, nn)));
  const __m256 dr =
      _mm256_mul_ps(_mm256_mul_ps(_mm256_mul_ps(dn, load<Full>(hnr + u, m)), rg), _mm256_sub_ps(one, rg));
  const __m256 dz = _mm256_mul_ps(
      _mm256_mul_ps(_mm256_mul_ps(dH, _mm256_sub_ps(load<Full>(hpr + u, m), nn)), z), _mm256_sub_ps(one, z));
  store<Full>(gi + u, m, dr);
  store<Full>(gi + H + u, m, dz);
  store<Full>(gi + 2 * H + u, m, dn);
  store<Full>(gh + u, m, dr);
  store<Full>(gh + H + u, m, dz);
  store<Full>(gh + 2 * H + u, m, _mm256_mul_ps(dn, rg));
  store<Full>(dhr + u, m, _mm256_mul_ps(dH, z));
}

// Columns [c0, c0 + 8 kStrip) (those below packet_cols unless Full) summed in Eigen 3.4's order.
constexpr int kStrip = 8;  // 64 columns: each row's strip is one contiguous run

template <bool Full>
GYRE_AVX2_EXACT void column_strip(const float* p, std::ptrdiff_t rows, std::ptrdiff_t rows4,
                                  std::ptrdiff_t lda, std::ptrdiff_t valid, float* o) {
  __m256i m[kStrip];
  __m256 acc[kStrip];
#pragma GCC unroll 8
  for (int v = 0; v < kStrip; ++v) {
    m[v] = cols_mask(valid - 8 * v);
    acc[v] = load<Full>(p + 8 * v, m[v]);
  }
  std::ptrdiff_t r = 1;
  for (; r < rows4; r += 4) {
    const float* q = p + r * lda;
#pragma GCC unroll 8
    for (int v = 0; v < kStrip; ++v) {
      const __m256 x01 = _mm256_add_ps(load<Full>(q + 8 * v, m[v]), load<Full>(q + lda + 8 * v, m[v]));
      const __m256 x23 =
          _mm256_add_ps(load<Full>(q + 2 * lda + 8 * v, m[v]), load<Full>(q + 3 * lda + 8 * v, m[v]));
      acc[v] = _mm256_add_ps(acc[v], _mm256_add_ps(x01, x23));
    }
  }
  for (; r < rows; ++r) {
    const float* q = p + r * lda;
#pragma GCC unroll 8
    for (int v = 0; v < kStrip; ++v) acc[v] = _mm256_add_ps(acc[v], load<Full>(q + 8 * v, m[v]));
  }
#pragma GCC unroll 8
  for (int v = 0; v < kStrip; ++v)
    store<Full>(o + 8 * v, m[v], _mm256_add_ps(load<Full>(o + 8 * v, m[v]), acc[v]));
}

}  // namespace

GYRE_AVX2_EXACT void lstm_cell_backward(std::ptrdiff_t n, std::ptrdiff_t H, const float* d_out,
                                        std::ptrdiff_t ld_out, const int* source, const float* dh, float* dc,
                                        const float* acts, const float* tanh_c, const float* c_prev,
                                        float* dgates) {
  const std::ptrdiff_t full = H & ~std::ptrdiff_t{7};  // H need not be a multiple of 8
  const __m256i all = cols_mask(8), tail = cols_mask(H - full);
  for (std::ptrdiff_t r = 0; r < n; ++r) {
    const float* dor = d_out != nullptr ? d_out + static_cast<std::ptrdiff_t>(source[r]) * ld_out : nullptr;
    const float *dhr = dh + r * H, *a = acts + r * 4 * H, *tcr = tanh_c + r * H, *cpr = c_prev + r * H;
    float *dcr = dc + r * H, *dg = dgates + r * 4 * H;
    for (std::ptrdiff_t u = 0; u < full; u += 8)
      lstm_back_units<true>(H, u, all, dhr, dor, dcr, a, tcr, cpr, dg);
    if (full < H) lstm_back_units<false>(H, full, tail, dhr, dor, dcr, a, tcr, cpr, dg);
  }
}

GYRE_AVX2_EXACT void gru_cell_backward(std::ptrdiff_t n, std::ptrdiff_t H, const float* d_out,
                                       std::ptrdiff_t ld_out, const int* source, float* dh, const float* acts,
                                       const float* hn, const float* h_prev, float* dgi, float* dgh) {
  const std::ptrdiff_t full = H & ~std::ptrdiff_t{7};
  const __m256i all = cols_mask(8), tail = cols_mask(H - full);
  for (std::ptrdiff_t r = 0; r < n; ++r) {
    const float* dor = d_out != nullptr ? d_out + static_cast<std::ptrdiff_t>(source[r]) * ld_out : nullptr;
    const float *a = acts + r * 3 * H, *hnr = hn + r * H, *hpr = h_prev + r * H;
    float *dhr = dh + r * H, *gi = dgi + r * 3 * H, *gh = dgh + r * 3 * H;
    for (std::ptrdiff_t u = 0; u < full; u += 8)
      gru_back_units<true>(H, u, all, dhr, dor, a, hnr, hpr, gi, gh);
    if (full < H) gru_back_units<false>(H, full, tail, dhr, dor, a, hnr, hpr, gi, gh);
  }
}

// Column sums in Eigen 3.4's order for a row-major matrix (see add_column_sums_avx512 in
// fast_kernels.cpp): one lane per column, so the bits do not depend on the vector width.
GYRE_AVX2_EXACT void add_column_sums(const float* a, std::ptrdiff_t rows, std::ptrdiff_t cols,
                                     std::ptrdiff_t lda, float* out) {
  if (rows <= 0) return;
  const std::ptrdiff_t rows4 = (rows - 1) & ~std::ptrdiff_t{3};
  const std::ptrdiff_t packet_cols = cols & ~std::ptrdiff_t{3};
  for (std::ptrdiff_t c0 = 0; c0 < packet_cols; c0 += 8 * kStrip) {
    if (c0 + 8 * kStrip <= packet_cols)
      column_strip<true>(a + c0, rows, rows4, lda, 8 * kStrip, out + c0);
    else
      column_strip<false>(a + c0, rows, rows4, lda, packet_cols - c0, out + c0);
  }
  for (std::ptrdiff_t c = packet_cols; c < cols; ++c) {
    float s = a[c];
    for (std::ptrdiff_t r = 1; r < rows; ++r) s += a[r * lda + c];
    out[c] += s;
  }
}

// ---- packing (the bytes of fast_kernels.cpp's plain packers, by 8 x 8 in-register transposes) ---

GYRE_AVX2 void pack_gates_panels(const float* u, int gates, std::ptrdiff_t hidden, float* out,
                                 std::ptrdiff_t p_begin, std::ptrdiff_t p_end) {
  const std::ptrdiff_t nr = static_cast<std::ptrdiff_t>(gates) * kCellUnits;
  const std::ptrdiff_t sub_nr = static_cast<std::ptrdiff_t>(gates) * kAvx2CellUnits;
  for (std::ptrdiff_t p = p_begin; p < p_end; ++p)
    for (std::ptrdiff_t s0 = 0; s0 < kCellUnits; s0 += kAvx2CellUnits) {
      float* dst = out + p * nr * hidden + s0 / kAvx2CellUnits * sub_nr * hidden;
      for (int g = 0; g < gates; ++g) {
        // Column g*8 + j of the sub-panel = row g*H + 16p + s0 + j of U (read transposed).
        const float* src = u + (static_cast<std::ptrdiff_t>(g) * hidden + p * kCellUnits + s0) * hidden;
        for (std::ptrdiff_t k0 = 0; k0 < hidden; k0 += 8) {  // hidden is a multiple of 16
          __m256 r[8];
          for (int j = 0; j < 8; ++j) r[j] = _mm256_loadu_ps(src + j * hidden + k0);
          transpose8(r);
          for (int q = 0; q < 8; ++q) _mm256_storeu_ps(dst + (k0 + q) * sub_nr + g * kAvx2CellUnits, r[q]);
        }
      }
    }
}

GYRE_AVX2 bool pack_b_transposed(const float* b, std::ptrdiff_t ldb, std::ptrdiff_t k, std::ptrdiff_t n,
                                 float* out) {
  // Whole panels and k a multiple of 8 only (the layers' W: 4H or 3H rows, D columns); the caller
  // packs anything else with the plain packer.
  if (n % kGemmNr != 0 || k % 8 != 0) return false;
  for (std::ptrdiff_t p0 = 0; p0 < n; p0 += kGemmNr) {
    float* dst = out + p0 * k;
    for (std::ptrdiff_t j0 = 0; j0 < kGemmNr; j0 += 8) {
      const float* src = b + (p0 + j0) * ldb;  // storage rows = columns of op(B)
      for (std::ptrdiff_t k0 = 0; k0 < k; k0 += 8) {
        __m256 r[8];
        for (int j = 0; j < 8; ++j) r[j] = _mm256_loadu_ps(src + j * ldb + k0);
        transpose8(r);
        for (int q = 0; q < 8; ++q) _mm256_storeu_ps(dst + (k0 + q) * kGemmNr + j0, r[q]);
      }
    }
  }
  return true;
}

}  // namespace gyre::nn::detail::fast::avx2

#endif
