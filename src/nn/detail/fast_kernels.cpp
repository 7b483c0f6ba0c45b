// AVX-512 training kernels (see fast_kernels.hpp). Every function that uses AVX-512 carries a
// target attribute, so this file builds for plain x86-64 (and compiles to stubs elsewhere) and
// the choice is made at run time from the CPU's features.

#include "fast_kernels.hpp"

#include "fast_kernels_avx2.hpp"
#include "gyre/core/cpu_features.hpp"

#include <algorithm>
#include <cstdlib>
#include <cstring>
#include <new>
#include <string_view>

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <immintrin.h>
#define GYRE_NN_X86 1
#endif

namespace gyre::nn::detail::fast {

float* AlignedBuffer::reserve(std::size_t n) {
  if (n > size_) {
    data_.reset(static_cast<float*>(::operator new (n * sizeof(float), std::align_val_t{64})));
    size_ = n;
  }
  return data_.get();
}

float* AlignedBuffer::grow(std::size_t n) {
  if (n > size_) {
    data_.reset();  // free first: the new block may reuse the old one's memory
    size_ = 0;
    const std::size_t with_slack = n + n / 2;
    data_.reset(static_cast<float*>(::operator new (with_slack * sizeof(float), std::align_val_t{64})));
    size_ = with_slack;
  }
  return data_.get();
}

void AlignedBuffer::Free::operator()(float* p) const noexcept {
  ::operator delete (p, std::align_val_t{64});
}

bool available() noexcept {
  return training_kernels() != TrainingKernels::kPortable;
}

const char* name() noexcept {
  switch (training_kernels()) {
    case TrainingKernels::kAvx512:
      return "avx512";
    case TrainingKernels::kAvx2:
      return "avx2";
    case TrainingKernels::kPortable:
      break;
  }
  return "portable";
}

// ---- packing (plain C++ here; the AVX-512 versions below give the same bytes; the AVX2 level
// packs U in its own layout, fast_kernels_avx2.cpp, and B with these or its own transposes) ------

namespace {

void pack_b_plain(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k, std::ptrdiff_t n,
                  float* out) {
  constexpr std::ptrdiff_t nr = kGemmNr;
  for (std::ptrdiff_t p0 = 0; p0 < n; p0 += nr) {
    const std::ptrdiff_t w = std::min(nr, n - p0);
    float* dst = out + p0 * k;  // panel p0 / nr starts at (p0 / nr) * nr * k
    if (!trans) {
      for (std::ptrdiff_t kk = 0; kk < k; ++kk) {
        const float* src = b + kk * ldb + p0;
        float* d = dst + kk * nr;
        std::memcpy(d, src, static_cast<std::size_t>(w) * sizeof(float));
        std::fill(d + w, d + nr, 0.0f);
      }
    } else {
      // B^T stored [n x k]: column j of B is row j of the storage.
      for (std::ptrdiff_t kk = 0; kk < k; ++kk) std::fill(dst + kk * nr + w, dst + kk * nr + nr, 0.0f);
      for (std::ptrdiff_t j = 0; j < w; ++j) {
        const float* src = b + (p0 + j) * ldb;
        for (std::ptrdiff_t kk = 0; kk < k; ++kk) dst[kk * nr + j] = src[kk];
      }
    }
  }
}

// The AVX-512 layout in plain C++: the packer of builds without x86 kernels.
[[maybe_unused]] void pack_gates_plain(const float* u, int gates, std::ptrdiff_t hidden, float* out,
                                       std::ptrdiff_t p_begin, std::ptrdiff_t p_end) {
  const std::ptrdiff_t nr = static_cast<std::ptrdiff_t>(gates) * kCellUnits;
  for (std::ptrdiff_t p = p_begin; p < p_end; ++p) {
    float* dst = out + p * nr * hidden;
    for (int g = 0; g < gates; ++g)
      for (std::ptrdiff_t j = 0; j < kCellUnits; ++j) {
        // Column g*16 + j of the panel = row g*H + 16p + j of U (read transposed).
        const float* src = u + (static_cast<std::ptrdiff_t>(g) * hidden + p * kCellUnits + j) * hidden;
        float* d = dst + g * kCellUnits + j;
        for (std::ptrdiff_t kk = 0; kk < hidden; ++kk) d[kk * nr] = src[kk];
      }
  }
}

}  // namespace

void pack_b_panels(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k, std::ptrdiff_t n,
                   float* out, std::ptrdiff_t panel_begin, std::ptrdiff_t panel_end) {
  // Panel p holds columns [p * kGemmNr, p * kGemmNr + kGemmNr) at out + p * kGemmNr * k: the same
  // bytes as packing the column block alone.
  const std::ptrdiff_t c0 = panel_begin * kGemmNr, c1 = std::min(n, panel_end * kGemmNr);
  if (c1 <= c0) return;
  pack_b(trans ? b + c0 * ldb : b + c0, ldb, trans, k, c1 - c0, out + c0 * k);
}

#if defined(GYRE_NN_X86)

#define GYRE_AVX512 __attribute__((target("avx512f,avx512dq,avx512bw,avx512vl,fma")))
#define GYRE_AVX512_INLINE \
  __attribute__((target("avx512f,avx512dq,avx512bw,avx512vl,fma"), always_inline)) inline

namespace {

// ---- activations ------------------------------------------------------------------------------
// e^x after Cephes expf (S. Moshier): n = round(x log2 e), r = x - n ln2 (ln2 in two parts),
// e^r by a degree-6 polynomial, times 2^n (vscalefps). Relative error about 1 ulp on [-87, 88].
GYRE_AVX512_INLINE __m512 exp512(__m512 x) {
  x = _mm512_max_ps(_mm512_min_ps(x, _mm512_set1_ps(88.3762626647949f)), _mm512_set1_ps(-87.3365447504f));
  const __m512 n = _mm512_roundscale_ps(_mm512_mul_ps(x, _mm512_set1_ps(1.44269504088896341f)),
                                        _MM_FROUND_TO_NEAREST_INT | _MM_FROUND_NO_EXC);
  __m512 r = _mm512_fnmadd_ps(n, _mm512_set1_ps(0.693359375f), x);
  r = _mm512_fnmadd_ps(n, _mm512_set1_ps(-2.12194440e-4f), r);
  __m512 y = _mm512_set1_ps(1.9875691500e-4f);
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(1.3981999507e-3f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(8.3334519073e-3f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(4.1665795894e-2f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(1.6666665459e-1f));
  y = _mm512_fmadd_ps(y, r, _mm512_set1_ps(5.0000001201e-1f));
  y = _mm512_fmadd_ps(y, _mm512_mul_ps(r, r), _mm512_add_ps(r, _mm512_set1_ps(1.0f)));
  return _mm512_scalef_ps(y, n);
}

GYRE_AVX512_INLINE __m512 sigmoid512(__m512 x) {
  const __m512 one = _mm512_set1_ps(1.0f);
  return _mm512_div_ps(one, _mm512_add_ps(one, exp512(_mm512_sub_ps(_mm512_setzero_ps(), x))));
}

// tanh after Cephes tanhf: |x| < 0.625: x + x^3 P(x^2); else sign(x) (1 - 2 / (e^{2|x|} + 1)).
// (Polynomial coefficients from Cephes tanhf.c, recalled from memory; the layer tests compare
// with std::tanh through the parity fixtures.)
GYRE_AVX512_INLINE __m512 tanh512(__m512 x) {
  const __m512 ax = _mm512_abs_ps(x);
  const __m512 one = _mm512_set1_ps(1.0f);
  const __m512 e = exp512(_mm512_add_ps(ax, ax));
  __m512 big = _mm512_sub_ps(one, _mm512_div_ps(_mm512_set1_ps(2.0f), _mm512_add_ps(e, one)));
  big = _mm512_castsi512_ps(_mm512_or_si512(
      _mm512_castps_si512(big), _mm512_and_si512(_mm512_castps_si512(x), _mm512_set1_epi32(INT32_MIN))));
  const __m512 z = _mm512_mul_ps(x, x);
  __m512 p = _mm512_set1_ps(-5.70498872745e-3f);
  p = _mm512_fmadd_ps(p, z, _mm512_set1_ps(2.06390887954e-2f));
  p = _mm512_fmadd_ps(p, z, _mm512_set1_ps(-5.37397155531e-2f));
  p = _mm512_fmadd_ps(p, z, _mm512_set1_ps(1.33314422036e-1f));
  p = _mm512_fmadd_ps(p, z, _mm512_set1_ps(-3.33332819422e-1f));
  const __m512 small = _mm512_fmadd_ps(_mm512_mul_ps(p, z), x, x);
  const __mmask16 is_small = _mm512_cmp_ps_mask(ax, _mm512_set1_ps(0.625f), _CMP_LT_OQ);
  return _mm512_mask_blend_ps(is_small, big, small);
}

// ---- micro-kernel -----------------------------------------------------------------------------
// acc[r][v] = sum_kk A(r, kk) * Bp[kk][16v .. 16v+15] for an M x (16 NV) tile; A(r, kk) is
// a[r * rs + kk * ks] (rs = lda, ks = 1 for a row-major A; rs = 1, ks = lda for A stored transposed).
// One FMA chain per accumulator, kk in order: the summation order is fixed by k alone.
template <int M, int NV, bool TransA>
GYRE_AVX512_INLINE void tile(std::ptrdiff_t k, const float* a, std::ptrdiff_t lda, const float* bp,
                             __m512 (&acc)[M][NV]) {
#pragma GCC unroll 16
  for (int r = 0; r < M; ++r)
#pragma GCC unroll 4
    for (int v = 0; v < NV; ++v) acc[r][v] = _mm512_setzero_ps();
  for (std::ptrdiff_t kk = 0; kk < k; ++kk) {
    __m512 b[NV];
#pragma GCC unroll 4
    for (int v = 0; v < NV; ++v) b[v] = _mm512_load_ps(bp + kk * (16 * NV) + 16 * v);
#pragma GCC unroll 16
    for (int r = 0; r < M; ++r) {
      const __m512 av = _mm512_set1_ps(TransA ? a[kk * lda + r] : a[r * lda + kk]);
#pragma GCC unroll 4
      for (int v = 0; v < NV; ++v) acc[r][v] = _mm512_fmadd_ps(av, b[v], acc[r][v]);
    }
  }
}

GYRE_AVX512_INLINE __mmask16 cols_mask(std::ptrdiff_t cols) {
  return cols >= 16 ? __mmask16(0xFFFF) : cols <= 0 ? __mmask16(0) : __mmask16((1u << cols) - 1u);
}

// General GEMM tile: C (+)= acc for `cols` valid columns, then + bias[col] when bias is given
// (two roundings, as adding the bias to the finished product).
template <int M, bool TransA>
GYRE_AVX512 void gemm_tile(std::ptrdiff_t k, const float* a, std::ptrdiff_t lda, const float* bp, float* c,
                           std::ptrdiff_t ldc, std::ptrdiff_t cols, bool accumulate, const float* bias) {
  constexpr int NV = kGemmNr / 16;
  __m512 acc[M][NV];
  tile<M, NV, TransA>(k, a, lda, bp, acc);
  if (cols == kGemmNr) {
    __m512 bv[NV];
    for (int v = 0; v < NV; ++v)
      bv[v] = bias != nullptr ? _mm512_loadu_ps(bias + 16 * v) : _mm512_setzero_ps();
#pragma GCC unroll 16
    for (int r = 0; r < M; ++r)
#pragma GCC unroll 4
      for (int v = 0; v < NV; ++v) {
        float* p = c + r * ldc + 16 * v;
        __m512 out = accumulate ? _mm512_add_ps(_mm512_loadu_ps(p), acc[r][v]) : acc[r][v];
        if (bias != nullptr) out = _mm512_add_ps(out, bv[v]);
        _mm512_storeu_ps(p, out);
      }
    return;
  }
  for (int r = 0; r < M; ++r)
    for (int v = 0; v < NV; ++v) {
      const __mmask16 m = cols_mask(cols - 16 * v);
      float* p = c + r * ldc + 16 * v;
      __m512 out = accumulate ? _mm512_add_ps(_mm512_maskz_loadu_ps(m, p), acc[r][v]) : acc[r][v];
      if (bias != nullptr) out = _mm512_add_ps(out, _mm512_maskz_loadu_ps(m, bias + 16 * v));
      _mm512_mask_storeu_ps(p, m, out);
    }
}

constexpr int kGemmMr = 12;

template <bool TransA>
GYRE_AVX512 void gemm_rows(std::ptrdiff_t rows, std::ptrdiff_t k, const float* a, std::ptrdiff_t lda,
                           const float* bp, float* c, std::ptrdiff_t ldc, std::ptrdiff_t cols,
                           bool accumulate, const float* bias) {
  // a points at the tile's first row (row-major) or first column (transposed storage).
  const std::ptrdiff_t row_step = TransA ? 1 : lda;
  std::ptrdiff_t r = 0;
  for (; r + kGemmMr <= rows; r += kGemmMr)
    gemm_tile<kGemmMr, TransA>(k, a + r * row_step, lda, bp, c + r * ldc, ldc, cols, accumulate, bias);
  const float* ar = a + r * row_step;
  float* cr = c + r * ldc;
  switch (rows - r) {
    case 0:
      break;
#define GYRE_TAIL(R)                                                       \
  case R:                                                                  \
    gemm_tile<R, TransA>(k, ar, lda, bp, cr, ldc, cols, accumulate, bias); \
    break;
      GYRE_TAIL(1)
      GYRE_TAIL(2)
      GYRE_TAIL(3)
      GYRE_TAIL(4)
      GYRE_TAIL(5)
      GYRE_TAIL(6)
      GYRE_TAIL(7)
      GYRE_TAIL(8)
      GYRE_TAIL(9)
      GYRE_TAIL(10)
      GYRE_TAIL(11)
#undef GYRE_TAIL
    default:
      break;
  }
}

template <bool TransA>
GYRE_AVX512 void gemm_avx512(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a,
                             std::ptrdiff_t lda, const float* bp, float* c, std::ptrdiff_t ldc,
                             bool accumulate, const float* bias) {
  const std::ptrdiff_t panels = (n + kGemmNr - 1) / kGemmNr;
  for (std::ptrdiff_t pc = 0; pc < k; pc += kGemmKc) {
    const std::ptrdiff_t kb = std::min<std::ptrdiff_t>(kGemmKc, k - pc);
    const bool acc = accumulate || pc > 0;
    const bool last = pc + kb >= k;  // the bias goes onto the finished sum
    for (std::ptrdiff_t ic = 0; ic < m; ic += kGemmMc) {
      const std::ptrdiff_t mb = std::min<std::ptrdiff_t>(kGemmMc, m - ic);
      const float* ablk = TransA ? a + pc * lda + ic : a + ic * lda + pc;
      for (std::ptrdiff_t p = 0; p < panels; ++p) {
        const float* bpan = bp + p * kGemmNr * k + pc * kGemmNr;
        gemm_rows<TransA>(mb, kb, ablk, lda, bpan, c + ic * ldc + p * kGemmNr, ldc,
                          std::min<std::ptrdiff_t>(kGemmNr, n - p * kGemmNr), acc,
                          last && bias != nullptr ? bias + p * kGemmNr : nullptr);
      }
    }
  }
}

// ---- fused LSTM step --------------------------------------------------------------------------
constexpr int kCellKc = 256;
constexpr int kLstmMr = 6;

template <int M>
GYRE_AVX512 void lstm_tile(std::ptrdiff_t kb, bool first, bool last, std::ptrdiff_t H, const float* hp,
                           std::ptrdiff_t ld, const float* bp, std::ptrdiff_t u0, const float* cp,
                           float* gates, float* c_out, float* tanh_c_out, float* h_out) {
  __m512 acc[M][4];
  tile<M, 4, false>(kb, hp, ld, bp, acc);
  (void)first;
#pragma GCC unroll 8
  for (int r = 0; r < M; ++r) {
    float* g = gates + r * 4 * H + u0;
    __m512 pre[4];
#pragma GCC unroll 4
    for (int v = 0; v < 4; ++v) pre[v] = _mm512_add_ps(_mm512_loadu_ps(g + v * H), acc[r][v]);
    if (!last) {
#pragma GCC unroll 4
      for (int v = 0; v < 4; ++v) _mm512_storeu_ps(g + v * H, pre[v]);
      continue;
    }
    const __m512 i = sigmoid512(pre[0]), f = sigmoid512(pre[1]), gg = tanh512(pre[2]), o = sigmoid512(pre[3]);
    const __m512 c = _mm512_fmadd_ps(f, _mm512_loadu_ps(cp + r * ld + u0), _mm512_mul_ps(i, gg));
    const __m512 tc = tanh512(c);
    _mm512_storeu_ps(g, i);
    _mm512_storeu_ps(g + H, f);
    _mm512_storeu_ps(g + 2 * H, gg);
    _mm512_storeu_ps(g + 3 * H, o);
    _mm512_storeu_ps(c_out + r * H + u0, c);
    _mm512_storeu_ps(tanh_c_out + r * H + u0, tc);
    _mm512_storeu_ps(h_out + r * H + u0, _mm512_mul_ps(o, tc));
  }
}

GYRE_AVX512 void lstm_step_avx512(std::ptrdiff_t n, std::ptrdiff_t H, const float* h_prev,
                                  const float* c_prev, std::ptrdiff_t ld, const float* up, float* gates,
                                  float* c_out, float* tanh_c_out, float* h_out) {
  constexpr std::ptrdiff_t nr = 4 * kCellUnits;
  const std::ptrdiff_t panels = H / kCellUnits;
  for (std::ptrdiff_t pc = 0; pc < H; pc += kCellKc) {
    const std::ptrdiff_t kb = std::min<std::ptrdiff_t>(kCellKc, H - pc);
    const bool first = pc == 0, last = pc + kb >= H;
    for (std::ptrdiff_t p = 0; p < panels; ++p) {
      const float* bp = up + p * nr * H + pc * nr;
      const std::ptrdiff_t u0 = p * kCellUnits;
      std::ptrdiff_t r = 0;
      for (; r + kLstmMr <= n; r += kLstmMr)
        lstm_tile<kLstmMr>(kb, first, last, H, h_prev + r * ld + pc, ld, bp, u0, c_prev + r * ld,
                           gates + r * 4 * H, c_out + r * H, tanh_c_out + r * H, h_out + r * H);
      const float* hp = h_prev + r * ld + pc;
      const float* cp = c_prev + r * ld;
      float* g = gates + r * 4 * H;
      switch (n - r) {
        case 0:
          break;
#define GYRE_TAIL(R)                                                                           \
  case R:                                                                                      \
    lstm_tile<R>(kb, first, last, H, hp, ld, bp, u0, cp, g, c_out + r * H, tanh_c_out + r * H, \
                 h_out + r * H);                                                               \
    break;
          GYRE_TAIL(1)
          GYRE_TAIL(2)
          GYRE_TAIL(3)
          GYRE_TAIL(4)
          GYRE_TAIL(5)
#undef GYRE_TAIL
        default:
          break;
      }
    }
  }
}

// ---- fused GRU step ---------------------------------------------------------------------------
constexpr int kGruMr = 8;

template <int M>
GYRE_AVX512 void gru_tile(std::ptrdiff_t kb, bool first, bool last, std::ptrdiff_t H, const float* hp_k,
                          const float* hp, std::ptrdiff_t ld, const float* bp, std::ptrdiff_t u0,
                          const float* bh, float* gates, float* hn_out, float* h_out) {
  __m512 acc[M][3];
  tile<M, 3, false>(kb, hp_k, ld, bp, acc);
  const __m512 bh_r = _mm512_loadu_ps(bh + u0), bh_z = _mm512_loadu_ps(bh + H + u0),
               bh_n = _mm512_loadu_ps(bh + 2 * H + u0);
#pragma GCC unroll 8
  for (int r = 0; r < M; ++r) {
    float* g = gates + r * 3 * H + u0;
    float* hn = hn_out + r * H + u0;
    // Partial sums of earlier k blocks: r, z in the gate rows; U[h~] h in hn_out.
    const __m512 sr = acc[r][0], sz = acc[r][1];
    const __m512 sn = first ? acc[r][2] : _mm512_add_ps(_mm512_loadu_ps(hn), acc[r][2]);
    if (!last) {
      _mm512_storeu_ps(g, _mm512_add_ps(_mm512_loadu_ps(g), sr));
      _mm512_storeu_ps(g + H, _mm512_add_ps(_mm512_loadu_ps(g + H), sz));
      _mm512_storeu_ps(hn, sn);
      continue;
    }
    const __m512 rg = sigmoid512(_mm512_add_ps(_mm512_loadu_ps(g), _mm512_add_ps(sr, bh_r)));
    const __m512 zg = sigmoid512(_mm512_add_ps(_mm512_loadu_ps(g + H), _mm512_add_ps(sz, bh_z)));
    const __m512 hnv = _mm512_add_ps(sn, bh_n);
    const __m512 ng = tanh512(_mm512_fmadd_ps(rg, hnv, _mm512_loadu_ps(g + 2 * H)));
    const __m512 h_old = _mm512_loadu_ps(hp + r * ld + u0);
    // h' = (1 - z) n + z h
    const __m512 h_new =
        _mm512_fmadd_ps(_mm512_sub_ps(_mm512_set1_ps(1.0f), zg), ng, _mm512_mul_ps(zg, h_old));
    _mm512_storeu_ps(g, rg);
    _mm512_storeu_ps(g + H, zg);
    _mm512_storeu_ps(g + 2 * H, ng);
    _mm512_storeu_ps(hn, hnv);
    _mm512_storeu_ps(h_out + r * H + u0, h_new);
  }
}

GYRE_AVX512 void gru_step_avx512(std::ptrdiff_t n, std::ptrdiff_t H, const float* h_prev, std::ptrdiff_t ld,
                                 const float* up, const float* bh, float* gates, float* hn_out,
                                 float* h_out) {
  constexpr std::ptrdiff_t nr = 3 * kCellUnits;
  const std::ptrdiff_t panels = H / kCellUnits;
  for (std::ptrdiff_t pc = 0; pc < H; pc += kCellKc) {
    const std::ptrdiff_t kb = std::min<std::ptrdiff_t>(kCellKc, H - pc);
    const bool first = pc == 0, last = pc + kb >= H;
    for (std::ptrdiff_t p = 0; p < panels; ++p) {
      const float* bp = up + p * nr * H + pc * nr;
      const std::ptrdiff_t u0 = p * kCellUnits;
      std::ptrdiff_t r = 0;
      for (; r + kGruMr <= n; r += kGruMr)
        gru_tile<kGruMr>(kb, first, last, H, h_prev + r * ld + pc, h_prev + r * ld, ld, bp, u0, bh,
                         gates + r * 3 * H, hn_out + r * H, h_out + r * H);
      const float* hk = h_prev + r * ld + pc;
      const float* hp = h_prev + r * ld;
      float* g = gates + r * 3 * H;
      switch (n - r) {
        case 0:
          break;
#define GYRE_TAIL(R)                                                                           \
  case R:                                                                                      \
    gru_tile<R>(kb, first, last, H, hk, hp, ld, bp, u0, bh, g, hn_out + r * H, h_out + r * H); \
    break;
          GYRE_TAIL(1)
          GYRE_TAIL(2)
          GYRE_TAIL(3)
          GYRE_TAIL(4)
          GYRE_TAIL(5)
          GYRE_TAIL(6)
          GYRE_TAIL(7)
#undef GYRE_TAIL
        default:
          break;
      }
    }
  }
}

// ---- packing ----------------------------------------------------------------------------------
// In-register transpose of a 16 x 16 block: for bit d = 8, 4, 2, 1, rows i and i + d (bit d of i
// clear) exchange the d-wide column blocks that sit across the diagonal, so element (r, c) has
// bit d of r and of c swapped; after the four stages it sits at (c, r). idx: the permutations of
// each stage (transpose16_indices), made once per call of the packer.
struct Transpose16Indices {
  __m512i lo[4], hi[4];
};

GYRE_AVX512_INLINE Transpose16Indices transpose16_indices() {
  Transpose16Indices t;
  for (int s = 0; s < 4; ++s) {
    const int d = 8 >> s;
    alignas(64) std::int32_t lo[16], hi[16];
    for (int l = 0; l < 16; ++l) {
      lo[l] = (l & d) != 0 ? 16 + (l ^ d) : l;  // row i: its own lanes, then row i + d's
      hi[l] = (l & d) != 0 ? 16 + l : (l ^ d);  // row i + d: row i's lanes, then its own
    }
    t.lo[s] = _mm512_load_si512(lo);
    t.hi[s] = _mm512_load_si512(hi);
  }
  return t;
}

GYRE_AVX512_INLINE void transpose16(__m512 (&r)[16], const Transpose16Indices& t) {
#pragma GCC unroll 4
  for (int s = 0; s < 4; ++s) {
    const int d = 8 >> s;
#pragma GCC unroll 16
    for (int i = 0; i < 16; ++i) {
      if ((i & d) != 0) continue;
      const __m512 a = r[i], b = r[i + d];
      r[i] = _mm512_permutex2var_ps(a, t.lo[s], b);
      r[i + d] = _mm512_permutex2var_ps(a, t.hi[s], b);
    }
  }
}

GYRE_AVX512 void pack_gates_avx512(const float* u, int gates, std::ptrdiff_t hidden, float* out,
                                   std::ptrdiff_t p_begin, std::ptrdiff_t p_end) {
  const std::ptrdiff_t nr = static_cast<std::ptrdiff_t>(gates) * kCellUnits;
  static_assert(kCellUnits == 16, "one 16 x 16 transpose per gate and 16 k");
  const Transpose16Indices t = transpose16_indices();
  for (std::ptrdiff_t p = p_begin; p < p_end; ++p) {
    float* dst = out + p * nr * hidden;
    for (int g = 0; g < gates; ++g) {
      // Column g*16 + j of the panel = row g*H + 16p + j of U (read transposed), 16 k at a time.
      const float* src = u + (static_cast<std::ptrdiff_t>(g) * hidden + p * kCellUnits) * hidden;
      for (std::ptrdiff_t k0 = 0; k0 < hidden; k0 += 16) {
        __m512 r[16];
#pragma GCC unroll 16
        for (int j = 0; j < 16; ++j) r[j] = _mm512_loadu_ps(src + j * hidden + k0);
        transpose16(r, t);
#pragma GCC unroll 16
        for (int kk = 0; kk < 16; ++kk) _mm512_storeu_ps(dst + (k0 + kk) * nr + g * kCellUnits, r[kk]);
      }
    }
  }
}

GYRE_AVX512 void pack_b_avx512(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k,
                               std::ptrdiff_t n, float* out) {
  constexpr std::ptrdiff_t nr = kGemmNr;
  static_assert(nr == 32, "two vectors per packed row");
  const __m512i lane = _mm512_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15);
  const Transpose16Indices t = transpose16_indices();
  for (std::ptrdiff_t p0 = 0; p0 < n; p0 += nr) {
    const std::ptrdiff_t w = std::min(nr, n - p0);
    const __mmask16 m0 = cols_mask(w), m1 = cols_mask(w - 16);
    float* dst = out + p0 * k;
    if (!trans) {
      const float* src = b + p0;
      for (std::ptrdiff_t kk = 0; kk < k; ++kk, src += ldb) {
        _mm512_storeu_ps(dst + kk * nr, _mm512_maskz_loadu_ps(m0, src));
        _mm512_storeu_ps(dst + kk * nr + 16, _mm512_maskz_loadu_ps(m1, src + 16));
      }
    } else {
      // B^T stored [n x k]: packed row kk gathers element kk of storage rows p0 .. p0 + 31.
      // ldb * 31 fits an int32 index for every layer size gyre allows (checked by the caller's
      // shapes: ldb is a layer width).
      const __m512i idx0 = _mm512_mullo_epi32(lane, _mm512_set1_epi32(static_cast<int>(ldb)));
      const __m512i idx1 = _mm512_add_epi32(idx0, _mm512_set1_epi32(static_cast<int>(16 * ldb)));
      const float* src = b + p0 * ldb;
      std::ptrdiff_t kk = 0;
      if (w == nr) {
        // A whole panel: 16 x 16 blocks transposed in registers (storage rows p0 .. p0 + 15, then
        // p0 + 16 .. p0 + 31), 16 k at a time; the gathers below take the k left over (and
        // partial panels). The same bytes either way.
        for (; kk + 16 <= k; kk += 16) {
#pragma GCC unroll 2
          for (int half = 0; half < 2; ++half) {
            __m512 r[16];
#pragma GCC unroll 16
            for (int j = 0; j < 16; ++j) r[j] = _mm512_loadu_ps(src + (half * 16 + j) * ldb + kk);
            transpose16(r, t);
#pragma GCC unroll 16
            for (int q = 0; q < 16; ++q) _mm512_storeu_ps(dst + (kk + q) * nr + half * 16, r[q]);
          }
        }
      }
      for (; kk < k; ++kk) {
        _mm512_storeu_ps(dst + kk * nr, _mm512_mask_i32gather_ps(_mm512_setzero_ps(), m0, idx0, src + kk, 4));
        _mm512_storeu_ps(dst + kk * nr + 16,
                         _mm512_mask_i32gather_ps(_mm512_setzero_ps(), m1, idx1, src + kk, 4));
      }
    }
  }
}

// ---- backward element-wise parts --------------------------------------------------------------
// Each product and sum is rounded as the portable path's Eigen expressions round them (left to
// right, no fused multiply-add: the optimize attribute keeps the compiler from contracting the
// intrinsics), so the gradients have the same bits as before these kernels existed.
#if defined(__clang__)
// Clang has no optimize attribute; it contracts only within one source expression, and each
// intrinsic is a call of its own, so nothing is contracted here.
#define GYRE_AVX512_EXACT GYRE_AVX512
#else
#define GYRE_AVX512_EXACT GYRE_AVX512 __attribute__((optimize("fp-contract=off")))
#endif

GYRE_AVX512_EXACT void lstm_cell_backward_avx512(std::ptrdiff_t n, std::ptrdiff_t H, const float* d_out,
                                                 std::ptrdiff_t ld_out, const int* source, const float* dh,
                                                 float* dc, const float* acts, const float* tanh_c,
                                                 const float* c_prev, float* dgates) {
  const __m512 one = _mm512_set1_ps(1.0f);
  for (std::ptrdiff_t r = 0; r < n; ++r) {
    const float* dhr = dh + r * H;
    const float* dor = d_out != nullptr ? d_out + static_cast<std::ptrdiff_t>(source[r]) * ld_out : nullptr;
    float* dcr = dc + r * H;
    const float* a = acts + r * 4 * H;
    const float* tcr = tanh_c + r * H;
    const float* cpr = c_prev + r * H;
    float* dg = dgates + r * 4 * H;
    // The next row's forward caches and gradient rows, fetched while this row is computed (they
    // were written long before, in the forward, and are in L3 or memory). Measured under load on
    // the training benchmark's model: this kernel's samples per recurrent-kernel sample -25%
    // (prefetching two rows ahead did the same); prefetches change nothing computed.
    const bool ahead = r + 1 < n;
    const float* a_next = ahead ? a + 4 * H : a;
    const float* tc_next = ahead ? tcr + H : tcr;
    const float* cp_next = ahead ? cpr + H : cpr;
    const float* dg_next = ahead ? dg + 4 * H : dg;
    for (std::ptrdiff_t u = 0; u < H; u += 16) {
      const __mmask16 m = cols_mask(H - u);  // H need not be a multiple of 16
      if (ahead) {
        for (int q = 0; q < 4; ++q) {
          _mm_prefetch(reinterpret_cast<const char*>(a_next + q * H + u), _MM_HINT_T0);
          _mm_prefetch(reinterpret_cast<const char*>(dg_next + q * H + u), _MM_HINT_T0);
        }
        _mm_prefetch(reinterpret_cast<const char*>(tc_next + u), _MM_HINT_T0);
        _mm_prefetch(reinterpret_cast<const char*>(cp_next + u), _MM_HINT_T0);
      }
      __m512 dH = _mm512_maskz_loadu_ps(m, dhr + u);
      if (dor != nullptr) dH = _mm512_add_ps(dH, _mm512_maskz_loadu_ps(m, dor + u));
      const __m512 i = _mm512_maskz_loadu_ps(m, a + u), f = _mm512_maskz_loadu_ps(m, a + H + u),
                   g = _mm512_maskz_loadu_ps(m, a + 2 * H + u), o = _mm512_maskz_loadu_ps(m, a + 3 * H + u),
                   tc = _mm512_maskz_loadu_ps(m, tcr + u);
      // dc += dh o (1 - tc^2)
      const __m512 dC =
          _mm512_add_ps(_mm512_maskz_loadu_ps(m, dcr + u),
                        _mm512_mul_ps(_mm512_mul_ps(dH, o), _mm512_sub_ps(one, _mm512_mul_ps(tc, tc))));
      // d_i = dc g i (1 - i); d_f = dc c_prev f (1 - f); d_g = dc i (1 - g^2); d_o = dh tc o (1 - o)
      _mm512_mask_storeu_ps(dg + u, m,
                            _mm512_mul_ps(_mm512_mul_ps(_mm512_mul_ps(dC, g), i), _mm512_sub_ps(one, i)));
      _mm512_mask_storeu_ps(
          dg + H + u, m,
          _mm512_mul_ps(_mm512_mul_ps(_mm512_mul_ps(dC, _mm512_maskz_loadu_ps(m, cpr + u)), f),
                        _mm512_sub_ps(one, f)));
      _mm512_mask_storeu_ps(dg + 2 * H + u, m,
                            _mm512_mul_ps(_mm512_mul_ps(dC, i), _mm512_sub_ps(one, _mm512_mul_ps(g, g))));
      _mm512_mask_storeu_ps(dg + 3 * H + u, m,
                            _mm512_mul_ps(_mm512_mul_ps(_mm512_mul_ps(dH, tc), o), _mm512_sub_ps(one, o)));
      _mm512_mask_storeu_ps(dcr + u, m, _mm512_mul_ps(dC, f));
    }
  }
}

GYRE_AVX512_EXACT void gru_cell_backward_avx512(std::ptrdiff_t n, std::ptrdiff_t H, const float* d_out,
                                                std::ptrdiff_t ld_out, const int* source, float* dh,
                                                const float* acts, const float* hn, const float* h_prev,
                                                float* dgi, float* dgh) {
  const __m512 one = _mm512_set1_ps(1.0f);
  for (std::ptrdiff_t r = 0; r < n; ++r) {
    float* dhr = dh + r * H;
    const float* dor = d_out != nullptr ? d_out + static_cast<std::ptrdiff_t>(source[r]) * ld_out : nullptr;
    const float* a = acts + r * 3 * H;
    const float* hnr = hn + r * H;
    const float* hpr = h_prev + r * H;
    float* gi = dgi + r * 3 * H;
    float* gh = dgh + r * 3 * H;
    // The next row's caches and gradient rows, fetched ahead as in lstm_cell_backward.
    const bool ahead = r + 1 < n;
    for (std::ptrdiff_t u = 0; u < H; u += 16) {
      const __mmask16 m = cols_mask(H - u);  // H need not be a multiple of 16
      if (ahead) {
        for (int q = 0; q < 3; ++q) {
          _mm_prefetch(reinterpret_cast<const char*>(a + (3 + q) * H + u), _MM_HINT_T0);
          _mm_prefetch(reinterpret_cast<const char*>(gi + (3 + q) * H + u), _MM_HINT_T0);
          _mm_prefetch(reinterpret_cast<const char*>(gh + (3 + q) * H + u), _MM_HINT_T0);
        }
        _mm_prefetch(reinterpret_cast<const char*>(hnr + H + u), _MM_HINT_T0);
        _mm_prefetch(reinterpret_cast<const char*>(hpr + H + u), _MM_HINT_T0);
      }
      __m512 dH = _mm512_maskz_loadu_ps(m, dhr + u);
      if (dor != nullptr) dH = _mm512_add_ps(dH, _mm512_maskz_loadu_ps(m, dor + u));
      const __m512 rg = _mm512_maskz_loadu_ps(m, a + u), z = _mm512_maskz_loadu_ps(m, a + H + u),
                   nn = _mm512_maskz_loadu_ps(m, a + 2 * H + u);
      // d_n = dh (1 - z)(1 - n^2); d_r = d_n hn r (1 - r); d_z = dh (h_prev - n) z (1 - z)
      const __m512 dn =
          _mm512_mul_ps(_mm512_mul_ps(dH, _mm512_sub_ps(one, z)), _mm512_sub_ps(one, _mm512_mul_ps(nn, nn)));
      const __m512 dr = _mm512_mul_ps(_mm512_mul_ps(_mm512_mul_ps(dn, _mm512_maskz_loadu_ps(m, hnr + u)), rg),
                                      _mm512_sub_ps(one, rg));
      const __m512 dz = _mm512_mul_ps(
          _mm512_mul_ps(_mm512_mul_ps(dH, _mm512_sub_ps(_mm512_maskz_loadu_ps(m, hpr + u), nn)), z),
          _mm512_sub_ps(one, z));
      _mm512_mask_storeu_ps(gi + u, m, dr);
      _mm512_mask_storeu_ps(gi + H + u, m, dz);
      _mm512_mask_storeu_ps(gi + 2 * H + u, m, dn);
      _mm512_mask_storeu_ps(gh + u, m, dr);
      _mm512_mask_storeu_ps(gh + H + u, m, dz);
      _mm512_mask_storeu_ps(gh + 2 * H + u, m, _mm512_mul_ps(dn, rg));
      _mm512_mask_storeu_ps(dhr + u, m, _mm512_mul_ps(dH, z));
    }
  }
}

// Column sums in the order of Eigen 3.4's vectorised colwise().sum() on a row-major matrix
// (packetwise_redux_impl, Eigen/src/Core/PartialReduxEvaluator.h), which the portable path uses:
// s = row 0, then s += ((r_i + r_i+1) + (r_i+2 + r_i+3)) for i = 1, 5, ... below (rows - 1) & ~3,
// then the remaining rows one by one. Each lane is one column, so the bits do not depend on the
// vector width; the last cols % 4 columns (those Eigen sums as scalars, in row order) are summed
// in row order here too.
GYRE_AVX512_EXACT void add_column_sums_avx512(const float* a, std::ptrdiff_t rows, std::ptrdiff_t cols,
                                              std::ptrdiff_t lda, float* out) {
  const std::ptrdiff_t rows4 = (rows - 1) & ~std::ptrdiff_t{3};
  const std::ptrdiff_t packet_cols = cols & ~std::ptrdiff_t{3};
  // Strips of up to 16 vectors (256 columns): each row's strip is read as one contiguous run (a
  // strip of one vector would touch one line per row, 4H floats apart, and stall on every row).
  constexpr int kStrip = 16;
  for (std::ptrdiff_t c0 = 0; c0 < packet_cols; c0 += 16 * kStrip) {
    __mmask16 m[kStrip];
    __m512 acc[kStrip];
    const float* p = a + c0;
#pragma GCC unroll 16
    for (int v = 0; v < kStrip; ++v) {
      m[v] = cols_mask(packet_cols - c0 - 16 * v);
      acc[v] = _mm512_maskz_loadu_ps(m[v], p + 16 * v);
    }
    std::ptrdiff_t r = 1;
    for (; r < rows4; r += 4) {
      const float* q = p + r * lda;
#pragma GCC unroll 16
      for (int v = 0; v < kStrip; ++v) {
        const __m512 x01 = _mm512_add_ps(_mm512_maskz_loadu_ps(m[v], q + 16 * v),
                                         _mm512_maskz_loadu_ps(m[v], q + lda + 16 * v));
        const __m512 x23 = _mm512_add_ps(_mm512_maskz_loadu_ps(m[v], q + 2 * lda + 16 * v),
                                         _mm512_maskz_loadu_ps(m[v], q + 3 * lda + 16 * v));
        acc[v] = _mm512_add_ps(acc[v], _mm512_add_ps(x01, x23));
      }
    }
    for (; r < rows; ++r) {
      const float* q = p + r * lda;
#pragma GCC unroll 16
      for (int v = 0; v < kStrip; ++v)
        acc[v] = _mm512_add_ps(acc[v], _mm512_maskz_loadu_ps(m[v], q + 16 * v));
    }
#pragma GCC unroll 16
    for (int v = 0; v < kStrip; ++v) {
      float* o = out + c0 + 16 * v;
      _mm512_mask_storeu_ps(o, m[v], _mm512_add_ps(_mm512_maskz_loadu_ps(m[v], o), acc[v]));
    }
  }
  for (std::ptrdiff_t c = packet_cols; c < cols; ++c) {
    float s = a[c];
    for (std::ptrdiff_t r = 1; r < rows; ++r) s += a[r * lda + c];
    out[c] += s;
  }
}

}  // namespace

void pack_b(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k, std::ptrdiff_t n, float* out) {
  if (use_avx512_training_kernels())
    pack_b_avx512(b, ldb, trans, k, n, out);
  else if (!trans || !avx2::pack_b_transposed(b, ldb, k, n, out))
    pack_b_plain(b, ldb, trans, k, n, out);
}

void pack_gates_panels(const float* u, int gates, std::ptrdiff_t hidden, float* out,
                       std::ptrdiff_t panel_begin, std::ptrdiff_t panel_end) {
  if (use_avx512_training_kernels())
    pack_gates_avx512(u, gates, hidden, out, panel_begin, panel_end);
  else
    avx2::pack_gates_panels(u, gates, hidden, out, panel_begin, panel_end);
}

void add_column_sums(const float* a, std::ptrdiff_t rows, std::ptrdiff_t cols, std::ptrdiff_t lda,
                     float* out) {
  if (rows <= 0) return;
  if (use_avx512_training_kernels())
    add_column_sums_avx512(a, rows, cols, lda, out);
  else
    avx2::add_column_sums(a, rows, cols, lda, out);
}

void lstm_cell_backward(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* d_out, std::ptrdiff_t ld_out,
                        const int* source, const float* dh, float* dc, const float* acts, const float* tanh_c,
                        const float* c_prev, float* dgates) {
  if (use_avx512_training_kernels())
    lstm_cell_backward_avx512(n, hidden, d_out, ld_out, source, dh, dc, acts, tanh_c, c_prev, dgates);
  else
    avx2::lstm_cell_backward(n, hidden, d_out, ld_out, source, dh, dc, acts, tanh_c, c_prev, dgates);
}

void gru_cell_backward(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* d_out, std::ptrdiff_t ld_out,
                       const int* source, float* dh, const float* acts, const float* hn, const float* h_prev,
                       float* dgi, float* dgh) {
  if (use_avx512_training_kernels())
    gru_cell_backward_avx512(n, hidden, d_out, ld_out, source, dh, acts, hn, h_prev, dgi, dgh);
  else
    avx2::gru_cell_backward(n, hidden, d_out, ld_out, source, dh, acts, hn, h_prev, dgi, dgh);
}

void gemm_packed(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a, std::ptrdiff_t lda,
                 bool trans_a, const float* bp, float* c, std::ptrdiff_t ldc, bool accumulate,
                 float* /*work*/, const float* bias) {
  if (m <= 0 || n <= 0) return;
  if (k <= 0) {
    if (!accumulate)
      for (std::ptrdiff_t i = 0; i < m; ++i) std::fill(c + i * ldc, c + i * ldc + n, 0.0f);
    if (bias != nullptr)
      for (std::ptrdiff_t i = 0; i < m; ++i)
        for (std::ptrdiff_t j = 0; j < n; ++j) c[i * ldc + j] += bias[j];
    return;
  }
  if (!use_avx512_training_kernels())
    avx2::gemm_packed(m, n, k, a, lda, trans_a, bp, c, ldc, accumulate, bias);
  else if (trans_a)
    gemm_avx512<true>(m, n, k, a, lda, bp, c, ldc, accumulate, bias);
  else
    gemm_avx512<false>(m, n, k, a, lda, bp, c, ldc, accumulate, bias);
}

void lstm_step(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* h_prev, const float* c_prev,
               std::ptrdiff_t ld_state, const float* up, float* gates, float* c_out, float* tanh_c_out,
               float* h_out) {
  if (use_avx512_training_kernels())
    lstm_step_avx512(n, hidden, h_prev, c_prev, ld_state, up, gates, c_out, tanh_c_out, h_out);
  else
    avx2::lstm_step(n, hidden, h_prev, c_prev, ld_state, up, gates, c_out, tanh_c_out, h_out);
}

void gru_step(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* h_prev, std::ptrdiff_t ld_state,
              const float* up, const float* bias_hidden, float* gates, float* hn_out, float* h_out) {
  if (use_avx512_training_kernels())
    gru_step_avx512(n, hidden, h_prev, ld_state, up, bias_hidden, gates, hn_out, h_out);
  else
    avx2::gru_step(n, hidden, h_prev, ld_state, up, bias_hidden, gates, hn_out, h_out);
}

#else  // not x86-64: available() is false and these are never called.

void pack_b(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k, std::ptrdiff_t n, float* out) {
  pack_b_plain(b, ldb, trans, k, n, out);
}
void pack_gates_panels(const float* u, int gates, std::ptrdiff_t hidden, float* out,
                       std::ptrdiff_t panel_begin, std::ptrdiff_t panel_end) {
  pack_gates_plain(u, gates, hidden, out, panel_begin, panel_end);
}
void lstm_cell_backward(std::ptrdiff_t, std::ptrdiff_t, const float*, std::ptrdiff_t, const int*,
                        const float*, float*, const float*, const float*, const float*, float*) {
  std::abort();
}
void gru_cell_backward(std::ptrdiff_t, std::ptrdiff_t, const float*, std::ptrdiff_t, const int*, float*,
                       const float*, const float*, const float*, float*, float*) {
  std::abort();
}

void gemm_packed(std::ptrdiff_t, std::ptrdiff_t, std::ptrdiff_t, const float*, std::ptrdiff_t, bool,
                 const float*, float*, std::ptrdiff_t, bool, float*, const float*) {
  std::abort();
}
void lstm_step(std::ptrdiff_t, std::ptrdiff_t, const float*, const float*, std::ptrdiff_t, const float*,
               float*, float*, float*, float*) {
  std::abort();
}
void gru_step(std::ptrdiff_t, std::ptrdiff_t, const float*, std::ptrdiff_t, const float*, const float*,
              float*, float*, float*) {
  std::abort();
}

#endif

void pack_gates(const float* u, int gates, std::ptrdiff_t hidden, float* out) {
  pack_gates_panels(u, gates, hidden, out, 0, hidden / kCellUnits);
}

}  // namespace gyre::nn::detail::fast
