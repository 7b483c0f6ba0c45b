#pragma once
// Which instruction sets the training library's fast kernels may use on this CPU (decided once,
// at first use, from the CPU's features; the installed library is built for plain x86-64 and
// chooses at run time).

namespace gyre {

/// The training kernels this process uses, best first.
enum class TrainingKernels {
  kAvx512,    ///< x86-64 with AVX-512 F/DQ/BW/VL and FMA (and OS support for their registers)
  kAvx2,      ///< x86-64 with AVX2 and FMA: the same kernels at 8 floats a vector
  kPortable,  ///< anything else: the layers' Eigen path
};

/// The best level this CPU runs, capped by the environment variable GYRE_NN_KERNELS: "portable"
/// (the Eigen path), "avx2" (no AVX-512). Tests run every level the CPU has; benchmarks compare them.
TrainingKernels training_kernels() noexcept;

/// training_kernels() == TrainingKernels::kAvx512 (the optimizer's AVX-512 update).
bool use_avx512_training_kernels() noexcept;

}  // namespace gyre
