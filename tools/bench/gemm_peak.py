#!/usr/bin/python3
"""Single-core SGEMM peak of this machine, and which BLAS the reference uses.

Multiplies two 2048 x 2048 float32 matrices on one thread with numpy and with torch (both go
through the system BLAS, OpenBLAS when libopenblas0-pthread is the libblas.so.3 alternative) and
prints the best GFLOP/s (2 * n^3 flops per product) as JSON, together with the BLAS library file
and kernel ("architecture") that threadpoolctl or /proc/self/maps reports.
Run with OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE unset so OpenBLAS picks its best kernel:
  env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE /usr/bin/python3 tools/bench/gemm_peak.py
"""

import json
import time

N = 2048


def best_gflops(fn, repeats=5):
    """Best GFLOP/s over the repeats, by wall clock and by the process's CPU time (the latter is
    immune to time-slicing by other processes on a shared machine)."""
    fn()  # warm-up
    best_wall = best_cpu = float("inf")
    for _ in range(repeats):
        start, cpu_start = time.perf_counter(), time.process_time()
        fn()
        best_wall = min(best_wall, time.perf_counter() - start)
        best_cpu = min(best_cpu, time.process_time() - cpu_start)
    flops = 2.0 * N ** 3
    return flops / best_wall / 1e9, flops / best_cpu / 1e9


def main():
    import numpy as np
    import torch

    torch.set_num_threads(1)
    info = {"blas_libraries": sorted({line.split()[-1] for line in open("/proc/self/maps")
                                       if "blas" in line.split()[-1] or "lapack" in line.split()[-1]})}
    try:
        import threadpoolctl
        limiter = threadpoolctl.threadpool_limits(limits=1, user_api="blas")
        info["threadpools"] = [{k: p.get(k) for k in ("internal_api", "filepath", "version", "architecture",
                                                       "threading_layer", "num_threads")}
                               for p in threadpoolctl.threadpool_info()]
    except ImportError:
        limiter = None
    rng = np.random.default_rng(1)
    a = rng.standard_normal((N, N), dtype=np.float32)
    b = rng.standard_normal((N, N), dtype=np.float32)
    c = np.empty((N, N), dtype=np.float32)
    numpy_gflops = best_gflops(lambda: np.matmul(a, b, out=c))
    ta, tb = torch.from_numpy(a), torch.from_numpy(b)
    tc = torch.empty(N, N)
    torch_gflops = best_gflops(lambda: torch.mm(ta, tb, out=tc))
    info.update({"numpy_gflops": numpy_gflops[0], "torch_gflops": torch_gflops[0],
                 "numpy_gflops_cpu": numpy_gflops[1], "torch_gflops_cpu": torch_gflops[1],
                 "peak_gflops": max(numpy_gflops[0], torch_gflops[0]),
                 "peak_gflops_cpu": max(numpy_gflops[1], torch_gflops[1]), "n": N})
    print(json.dumps(info))
    if limiter is not None:
        limiter.restore_original_limits()


if __name__ == "__main__":
    main()
