#pragma once
// Vectorised Adam/AdamW block update (adam_kernel.cpp): the AVX-512 one only when
// gyre::training_kernels() is kAvx512, the AVX2 one only when it is kAvx2 or kAvx512.

#include <cstddef>

namespace gyre::optim::detail {

struct AdamStep {
  float beta1, beta2, learning_rate, epsilon, l2, decay, inv_bias1, inv_bias2;
};

/// The other replica's arrays of the block (Optimizer::update_block_fused), each may be null.
struct AdamPair {
  const float* add = nullptr;  // added to grad before everything else (the reduction)
  float* zero_also = nullptr;  // zeroed
  float* copy_to = nullptr;    // receives the new values
};

/// Returns bit 0 set when a gradient value was NaN, bit 1 when one was infinite (read after the
/// add, before the update). zero_grad: grad is zeroed after it is read; otherwise it is written
/// only when `pair.add` is given (it then holds the sum).
unsigned adam_update_avx512(const AdamStep& step, float* value, float* grad, float* m, float* v,
                            std::ptrdiff_t count, bool zero_grad, const AdamPair& pair = {});
/// The same update 8 lanes at a time (AVX2+FMA).
unsigned adam_update_avx2(const AdamStep& step, float* value, float* grad, float* m, float* v,
                          std::ptrdiff_t count, bool zero_grad, const AdamPair& pair = {});

/// The update of the best kernel this CPU runs (training_kernels() must not be kPortable).
unsigned adam_update(const AdamStep& step, float* value, float* grad, float* m, float* v,
                     std::ptrdiff_t count, bool zero_grad, const AdamPair& pair = {});

}  // namespace gyre::optim::detail
