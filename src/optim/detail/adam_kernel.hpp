#pragma once
// Vectorised Adam/AdamW block update (adam_kernel.cpp); call only when
// gyre::use_avx512_training_kernels() is true.

#include <cstddef>

namespace gyre::optim::detail {

struct AdamStep {
  float beta1, beta2, learning_rate, epsilon, l2, decay, inv_bias1, inv_bias2;
};

/// Returns bit 0 set when a gradient value was NaN, bit 1 when one was infinite (read before the
/// update). zero_grad: grad is zeroed after it is read (grad is written only then).
unsigned adam_update_avx512(const AdamStep& step, float* value, float* grad, float* m, float* v,
                            std::ptrdiff_t count, bool zero_grad);

}  // namespace gyre::optim::detail
