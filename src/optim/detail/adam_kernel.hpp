#pragma once
// Vectorised Adam/AdamW block update (adam_kernel.cpp); call only when
// gyre::use_avx512_training_kernels() is true.

#include <cstddef>

namespace gyre::optim::detail {

struct AdamStep {
  float beta1, beta2, learning_rate, epsilon, l2, decay, inv_bias1, inv_bias2;
};

void adam_update_avx512(const AdamStep& step, float* value, const float* grad, float* m, float* v,
                        std::ptrdiff_t count);

}  // namespace gyre::optim::detail
