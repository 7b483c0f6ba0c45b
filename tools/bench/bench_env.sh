# Shared setup of the benchmark drivers that compare gyre with python3-torch (sourced by
# run_rnn_bench.sh and run_train_bench.sh; see README.md "Recurrent layers" for the reasons).
#
#   bench_check_release BUILD_DIR NAME    exit 2 unless BUILD_DIR is a Release build
#   bench_check_torch NAME                exit 2 unless /usr/bin/python3 has torch and numpy
#   bench_setup_env MALLOC_TUNING(0|1)    sets: py, common_env (both sides), reference (torch
#                                         command prefix: OPENBLAS_CORETYPE/L2_SIZE unset)
#   bench_print_machine                   CPU, load, libblas.so.3 alternative, env

bench_check_release() {
  local build_type
  build_type=$(sed -n 's/^CMAKE_BUILD_TYPE:STRING=//p' "$1/CMakeCache.txt" 2>/dev/null || true)
  [[ $build_type == Release ]] || { echo "$2: $1 is a '$build_type' build; use a Release build" >&2; exit 2; }
}

bench_check_torch() {
  /usr/bin/python3 -c 'import torch, numpy' 2>/dev/null ||
    { echo "$1: /usr/bin/python3 lacks torch/numpy (tools/install-deps.sh --bench)" >&2; exit 2; }
}

bench_setup_env() {
  py=/usr/bin/python3
  # The same allocator settings for both sides: keep freed memory in the heap instead of
  # returning it to the kernel (page faults are very slow on this machine; torch's packed LSTM
  # backward otherwise spends most of its time faulting in fresh buffers).
  common_env=()
  if [[ $1 == 1 ]]; then
    common_env=(MALLOC_MMAP_THRESHOLD_=1073741824 MALLOC_TRIM_THRESHOLD_=4294967296 MALLOC_TOP_PAD_=268435456)
  fi
  # The reference runs with OPENBLAS_CORETYPE / OPENBLAS_L2_SIZE unset in its command alone, so
  # OpenBLAS picks its best kernel for this CPU.
  reference=(env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE "${common_env[@]}")
}

bench_print_machine() {
  echo "cpu: $(sed -n 's/^model name\s*: //p' /proc/cpuinfo | head -1), $(nproc) cores; avx512f: $(grep -q avx512f /proc/cpuinfo && echo yes || echo no)"
  echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
  echo "libblas.so.3 alternative: $(update-alternatives --query libblas.so.3-x86_64-linux-gnu 2>/dev/null | sed -n 's/^Value: //p')"
  echo "caller's OPENBLAS_CORETYPE=${OPENBLAS_CORETYPE-<unset>} OPENBLAS_L2_SIZE=${OPENBLAS_L2_SIZE-<unset>} (unset for the reference only)"
  echo "allocator settings for both sides: ${common_env[*]:-<none>}"
}
