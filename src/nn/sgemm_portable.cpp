// The GEMM kernel for the build's baseline instruction set (sgemm.hpp).
#include "detail/sgemm.hpp"

#define GYRE_SGEMM_VARIANT kSgemmPortable
#define GYRE_SGEMM_NAME "portable"
#define GYRE_SGEMM_EIGEN gyre_sgemm_eigen_portable
#include "detail/sgemm_kernel.inc"
