#include "gyre/core/cpu_features.hpp"

#include <cstdlib>
#include <string_view>

namespace gyre {

namespace {

TrainingKernels detect() noexcept {
  const char* env = std::getenv("GYRE_NN_KERNELS");
  const std::string_view cap = env != nullptr ? env : "";
  if (cap == "portable") return TrainingKernels::kPortable;
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
  // libgcc's feature bits include the OS check (XGETBV) for the AVX and AVX-512 register state.
  __builtin_cpu_init();
  if (cap != "avx2" && __builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512dq") &&
      __builtin_cpu_supports("avx512bw") && __builtin_cpu_supports("avx512vl") &&
      __builtin_cpu_supports("fma"))
    return TrainingKernels::kAvx512;
  if (__builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma")) return TrainingKernels::kAvx2;
#endif
  return TrainingKernels::kPortable;
}

}  // namespace

TrainingKernels training_kernels() noexcept {
  static const TrainingKernels chosen = detect();
  return chosen;
}

bool use_avx512_training_kernels() noexcept {
  return training_kernels() == TrainingKernels::kAvx512;
}

}  // namespace gyre
