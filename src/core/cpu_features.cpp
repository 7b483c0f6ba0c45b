#include "gyre/core/cpu_features.hpp"

#include <cstdlib>
#include <string_view>

namespace gyre {

namespace {

bool detect() noexcept {
  const char* env = std::getenv("GYRE_NN_KERNELS");
  // "avx2" too: the tests check the Eigen path with its AVX2 GEMM (nn/detail/sgemm.hpp) on
  // AVX-512 CPUs.
  if (env != nullptr && (std::string_view(env) == "portable" || std::string_view(env) == "avx2"))
    return false;
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
  // libgcc's feature bits include the OS check (XGETBV) for the AVX-512 register state.
  __builtin_cpu_init();
  return __builtin_cpu_supports("avx512f") && __builtin_cpu_supports("avx512dq") &&
         __builtin_cpu_supports("avx512bw") && __builtin_cpu_supports("avx512vl") &&
         __builtin_cpu_supports("fma");
#else
  return false;
#endif
}

}  // namespace

bool use_avx512_training_kernels() noexcept {
  static const bool ok = detect();
  return ok;
}

}  // namespace gyre
