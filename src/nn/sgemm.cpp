// Choosing the GEMM kernel (sgemm.hpp) by the CPU's features, once.

#include "detail/sgemm.hpp"

#include <cstdlib>
#include <string_view>

namespace gyre::nn::detail {

namespace {

const SgemmKernel& choose() {
  const char* cap_env = std::getenv("GYRE_NN_KERNELS");
  const std::string_view cap = cap_env ? cap_env : "";
#if (defined(__x86_64__) || defined(_M_X64)) && (defined(__GNUC__) || defined(__clang__))
  __builtin_cpu_init();
  // __builtin_cpu_supports checks the CPUID bits and that the OS saves the registers (XCR0).
  if (cap != "portable" && __builtin_cpu_supports("avx2") && __builtin_cpu_supports("fma")) return kSgemmAvx2;
#endif
  return kSgemmPortable;
}

}  // namespace

const SgemmKernel& sgemm_kernel() {
  static const SgemmKernel& chosen = choose();
  return chosen;
}

}  // namespace gyre::nn::detail
