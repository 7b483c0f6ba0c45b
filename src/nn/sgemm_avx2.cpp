// The GEMM kernel for x86-64 with AVX2 and FMA (sgemm.hpp); compiled with -mavx2 -mfma.
#include "detail/sgemm.hpp"

#if defined(__x86_64__) || defined(_M_X64)
#define GYRE_SGEMM_VARIANT kSgemmAvx2
#define GYRE_SGEMM_NAME "avx2"
#define GYRE_SGEMM_EIGEN gyre_sgemm_eigen_avx2
#include "detail/sgemm_kernel.inc"
#endif
