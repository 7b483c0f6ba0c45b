#!/usr/bin/python3
"""Shared setup of the python3-torch reference side of the benchmarks (rnn_torch.py, train_torch.py).

The reference runs with Debian's python3-torch (1.13) on the system OpenBLAS (pthread build); the
shell drivers start it with OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE unset so OpenBLAS picks its best
kernel. This module limits torch and OpenBLAS to the requested thread count and reports what is
actually in use.
"""

import os
import re


def limit_threads(torch, threads):
    """torch.set_num_threads(n), plus threadpoolctl limiting OpenBLAS's own pthread pool (which
    set_num_threads does not reach). Returns the limiter (restore_original_limits()) or None."""
    torch.set_num_threads(threads)
    try:
        import threadpoolctl
        return threadpoolctl.threadpool_limits(limits=threads, user_api="blas")
    except ImportError:
        return None


def blas_info(torch):
    """Which BLAS library and kernel this process uses, and its thread counts (JSON-ready)."""
    a = torch.randn(64, 64)
    (a @ a).sum()  # make sure the BLAS is loaded
    maps = sorted({line.split()[-1] for line in open("/proc/self/maps")
                   if "blas" in line.split()[-1] or "lapack" in line.split()[-1]})
    info = {"side": "torch-info", "torch": torch.__version__, "torch_threads": torch.get_num_threads(),
            "blas_libraries_loaded": maps,
            "build_blas": re.findall(r"BLAS_INFO=\w+", torch.__config__.show()),
            "cpu_capability": re.findall(r"CPU capability usage: (\w+)", torch.__config__.show()),
            "env_OPENBLAS_CORETYPE": os.environ.get("OPENBLAS_CORETYPE"),
            "env_OPENBLAS_L2_SIZE": os.environ.get("OPENBLAS_L2_SIZE")}
    try:
        import threadpoolctl
        info["threadpools"] = [{k: p.get(k) for k in ("internal_api", "filepath", "version", "architecture",
                                                       "threading_layer", "num_threads")}
                               for p in threadpoolctl.threadpool_info()]
    except ImportError:
        info["threadpools"] = "threadpoolctl not installed"
    return info
