#pragma once
// Which instruction sets the training library's fast kernels may use on this CPU (decided once,
// at first use, from the CPU's features; the installed library is built for plain x86-64 and
// chooses at run time).

namespace gyre {

/// True on x86-64 CPUs with AVX-512 F/DQ/BW/VL and FMA (and OS support for their registers),
/// unless the environment variable GYRE_NN_KERNELS=portable (or avx2) turns the fast kernels off (tests
/// run both paths; benchmarks compare them).
bool use_avx512_training_kernels() noexcept;

}  // namespace gyre
