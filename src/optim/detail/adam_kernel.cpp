// Adam/AdamW block update with AVX-512 or AVX2+FMA (chosen at run time; see
// gyre/core/cpu_features.hpp). The same operations as the scalar loop in adam.cpp, 16 or 8 lanes
// at a time (the same operations in both widths, so the same bits): square root and
// division are correctly rounded in both, the multiply-adds may be fused differently, so the last
// bit can differ from the portable path (one machine always takes the same path).

#include "optim/detail/adam_kernel.hpp"

#include "gyre/core/cpu_features.hpp"

#include <cstdint>
#include <cstdlib>

#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <immintrin.h>

namespace gyre::optim::detail {

#define GYRE_AVX512 __attribute__((target("avx512f,avx512dq,avx512bw,avx512vl,fma")))

namespace {
GYRE_AVX512 inline __mmask16 cols_mask(std::ptrdiff_t cols) {
  return cols >= 16 ? __mmask16(0xFFFF) : __mmask16((1u << cols) - 1u);
}

// Software prefetch distance, in floats (4 KiB), on each of the four streams (value, gradient,
// m, v). The update is bound by these streams coming from L3 or memory (the dense parameters of
// an LSTM at hidden 256 are ~1.5 MB per array); measured under load on the training benchmark's
// model, the kernel's CPU samples per recurrent-kernel sample fell ~30% with 4 KiB, ~25% with
// 2 KiB and 8 KiB, ~8% with 1 KiB (issue 13). Prefetches never fault, so the ones past the end of
// an array are harmless; they do not change what is computed.
constexpr std::ptrdiff_t kAhead = 1024;

// The address is formed as an integer: no pointer past the end of an array is ever made. A prefetch
// is baseline x86-64 (SSE), so both kernels below use this one.
inline void prefetch_ahead(const float* p) {
  _mm_prefetch(reinterpret_cast<const char*>(reinterpret_cast<std::uintptr_t>(p) + kAhead * sizeof(float)),
               _MM_HINT_T0);
}
}  // namespace

GYRE_AVX512 unsigned adam_update_avx512(const AdamStep& st, float* value, float* grad, float* m, float* v,
                                        std::ptrdiff_t count, bool zero_grad, const AdamPair& pair) {
  const float* add = pair.add;
  float* zero_also = pair.zero_also;
  float* copy_to = pair.copy_to;
  const __m512 b1 = _mm512_set1_ps(st.beta1), b2 = _mm512_set1_ps(st.beta2);
  const __m512 one_b1 = _mm512_set1_ps(1.0f - st.beta1), one_b2 = _mm512_set1_ps(1.0f - st.beta2);
  const __m512 lr = _mm512_set1_ps(st.learning_rate), eps = _mm512_set1_ps(st.epsilon);
  const __m512 l2 = _mm512_set1_ps(st.l2), decay = _mm512_set1_ps(st.decay);
  const __m512 c1 = _mm512_set1_ps(st.inv_bias1), c2 = _mm512_set1_ps(st.inv_bias2);
  __mmask16 nan = 0, inf = 0;
  for (std::ptrdiff_t i = 0; i < count; i += 16) {
    const __mmask16 k = cols_mask(count - i);
    prefetch_ahead(value + i);
    prefetch_ahead(grad + i);
    prefetch_ahead(m + i);
    prefetch_ahead(v + i);
    if (add != nullptr) prefetch_ahead(add + i);
    if (zero_also != nullptr) prefetch_ahead(zero_also + i);
    if (copy_to != nullptr) prefetch_ahead(copy_to + i);
    const __m512 w = _mm512_maskz_loadu_ps(k, value + i);
    __m512 raw = _mm512_maskz_loadu_ps(k, grad + i);
    if (add != nullptr) raw = _mm512_add_ps(raw, _mm512_maskz_loadu_ps(k, add + i));  // the reduction's add
    nan = static_cast<__mmask16>(nan | _mm512_fpclass_ps_mask(raw, 0x81));  // quiet or signalling NaN
    inf = static_cast<__mmask16>(inf | _mm512_fpclass_ps_mask(raw, 0x18));  // +inf or -inf
    if (zero_grad)
      _mm512_mask_storeu_ps(grad + i, k, _mm512_setzero_ps());
    else if (add != nullptr)
      _mm512_mask_storeu_ps(grad + i, k, raw);
    if (zero_also != nullptr) _mm512_mask_storeu_ps(zero_also + i, k, _mm512_setzero_ps());
    const __m512 g = _mm512_fmadd_ps(l2, w, raw);
    const __m512 mi = _mm512_fmadd_ps(b1, _mm512_maskz_loadu_ps(k, m + i), _mm512_mul_ps(one_b1, g));
    const __m512 vi =
        _mm512_fmadd_ps(b2, _mm512_maskz_loadu_ps(k, v + i), _mm512_mul_ps(one_b2, _mm512_mul_ps(g, g)));
    const __m512 m_hat = _mm512_mul_ps(mi, c1), v_hat = _mm512_mul_ps(vi, c2);
    const __m512 upd =
        _mm512_fmadd_ps(decay, w, _mm512_div_ps(m_hat, _mm512_add_ps(_mm512_sqrt_ps(v_hat), eps)));
    _mm512_mask_storeu_ps(m + i, k, mi);
    _mm512_mask_storeu_ps(v + i, k, vi);
    const __m512 w_new = _mm512_fnmadd_ps(lr, upd, w);
    _mm512_mask_storeu_ps(value + i, k, w_new);
    if (copy_to != nullptr) _mm512_mask_storeu_ps(copy_to + i, k, w_new);
  }
  return (nan != 0 ? 1u : 0u) | (inf != 0 ? 2u : 0u);
}

#define GYRE_AVX2 __attribute__((target("avx2,fma")))

namespace {
// Lanes [0, cols) of a vector, for the last, partial vector of an array.
GYRE_AVX2 inline __m256i lanes_mask(std::ptrdiff_t cols) {
  return _mm256_cmpgt_epi32(_mm256_set1_epi32(static_cast<int>(cols < 8 ? cols : 8)),
                            _mm256_setr_epi32(0, 1, 2, 3, 4, 5, 6, 7));
}

// Lanes [0, 8) when Full, else those set in k (vmaskmovps only for an array's last vector).
template <bool Full>
GYRE_AVX2 inline __m256 load(const float* p, __m256i k) {
  if constexpr (Full) {
    (void)k;
    return _mm256_loadu_ps(p);
  } else {
    return _mm256_maskload_ps(p, k);
  }
}
template <bool Full>
GYRE_AVX2 inline void store(float* p, __m256i k, __m256 x) {
  if constexpr (Full) {
    (void)k;
    _mm256_storeu_ps(p, x);
  } else {
    _mm256_maskstore_ps(p, k, x);
  }
}

// One vector of the update (lanes set in k unless Full); the operations of adam_update_avx512.
template <bool Full>
GYRE_AVX2 inline void adam_lanes(const AdamStep& st, std::ptrdiff_t i, __m256i k, float* value, float* grad,
                                 float* m, float* v, bool zero_grad, const AdamPair& pair, __m256& nan,
                                 __m256& inf) {
  const __m256 w = load<Full>(value + i, k);
  __m256 raw = load<Full>(grad + i, k);
  if (pair.add != nullptr) raw = _mm256_add_ps(raw, load<Full>(pair.add + i, k));  // the reduction's add
  nan = _mm256_or_ps(nan, _mm256_cmp_ps(raw, raw, _CMP_UNORD_Q));
  inf = _mm256_or_ps(inf, _mm256_cmp_ps(_mm256_andnot_ps(_mm256_set1_ps(-0.0f), raw),
                                        _mm256_set1_ps(__builtin_inff()), _CMP_EQ_OQ));
  if (zero_grad)
    store<Full>(grad + i, k, _mm256_setzero_ps());
  else if (pair.add != nullptr)
    store<Full>(grad + i, k, raw);
  if (pair.zero_also != nullptr) store<Full>(pair.zero_also + i, k, _mm256_setzero_ps());
  const __m256 g = _mm256_fmadd_ps(_mm256_set1_ps(st.l2), w, raw);
  const __m256 mi = _mm256_fmadd_ps(_mm256_set1_ps(st.beta1), load<Full>(m + i, k),
                                    _mm256_mul_ps(_mm256_set1_ps(1.0f - st.beta1), g));
  const __m256 vi = _mm256_fmadd_ps(_mm256_set1_ps(st.beta2), load<Full>(v + i, k),
                                    _mm256_mul_ps(_mm256_set1_ps(1.0f - st.beta2), _mm256_mul_ps(g, g)));
  const __m256 m_hat = _mm256_mul_ps(mi, _mm256_set1_ps(st.inv_bias1));
  const __m256 v_hat = _mm256_mul_ps(vi, _mm256_set1_ps(st.inv_bias2));
  const __m256 upd =
      _mm256_fmadd_ps(_mm256_set1_ps(st.decay), w,
                      _mm256_div_ps(m_hat, _mm256_add_ps(_mm256_sqrt_ps(v_hat), _mm256_set1_ps(st.epsilon))));
  store<Full>(m + i, k, mi);
  store<Full>(v + i, k, vi);
  const __m256 w_new = _mm256_fnmadd_ps(_mm256_set1_ps(st.learning_rate), upd, w);
  store<Full>(value + i, k, w_new);
  if (pair.copy_to != nullptr) store<Full>(pair.copy_to + i, k, w_new);
}
}  // namespace

GYRE_AVX2 unsigned adam_update_avx2(const AdamStep& st, float* value, float* grad, float* m, float* v,
                                    std::ptrdiff_t count, bool zero_grad, const AdamPair& pair) {
  __m256 nan = _mm256_setzero_ps(), inf = _mm256_setzero_ps();
  const __m256i all = lanes_mask(8);
  std::ptrdiff_t i = 0;
  for (; i + 8 <= count; i += 8) {
    prefetch_ahead(value + i);
    prefetch_ahead(grad + i);
    prefetch_ahead(m + i);
    prefetch_ahead(v + i);
    if (pair.add != nullptr) prefetch_ahead(pair.add + i);
    if (pair.zero_also != nullptr) prefetch_ahead(pair.zero_also + i);
    if (pair.copy_to != nullptr) prefetch_ahead(pair.copy_to + i);
    adam_lanes<true>(st, i, all, value, grad, m, v, zero_grad, pair, nan, inf);
  }
  if (i < count)
    adam_lanes<false>(st, i, lanes_mask(count - i), value, grad, m, v, zero_grad, pair, nan, inf);
  return (_mm256_movemask_ps(nan) != 0 ? 1u : 0u) | (_mm256_movemask_ps(inf) != 0 ? 2u : 0u);
}

unsigned adam_update(const AdamStep& st, float* value, float* grad, float* m, float* v, std::ptrdiff_t count,
                     bool zero_grad, const AdamPair& pair) {
  if (use_avx512_training_kernels()) return adam_update_avx512(st, value, grad, m, v, count, zero_grad, pair);
  return adam_update_avx2(st, value, grad, m, v, count, zero_grad, pair);
}

}  // namespace gyre::optim::detail

#else

namespace gyre::optim::detail {
unsigned adam_update_avx512(const AdamStep&, float*, float*, float*, float*, std::ptrdiff_t, bool,
                            const AdamPair&) {
  std::abort();
}
unsigned adam_update_avx2(const AdamStep&, float*, float*, float*, float*, std::ptrdiff_t, bool,
                          const AdamPair&) {
  std::abort();
}
unsigned adam_update(const AdamStep&, float*, float*, float*, float*, std::ptrdiff_t, bool, const AdamPair&) {
  std::abort();
}
}  // namespace gyre::optim::detail

#endif
