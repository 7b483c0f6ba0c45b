#!/usr/bin/env bash
# Builds the embedded runtime, its C API and its tests for 64-bit ARM with Debian's cross compiler
# and runs them under qemu-user (ctest label `cross`). Run by .ci/run; the packages come from
# tools/install-deps.sh (g++-aarch64-linux-gnu, qemu-user).
#   bash tools/cross-test.sh [BUILD_DIR]      default build dir: build-aarch64
# Under emulation only correctness is measured, never speed.
set -euo pipefail
cd "$(dirname "$0")/.."
dir="${1:-build-aarch64}"
for tool in aarch64-linux-gnu-g++ qemu-aarch64; do
  if ! command -v "$tool" >/dev/null 2>&1; then
    echo "cross-test: $tool not found; run 'bash tools/install-deps.sh' first" >&2
    exit 1
  fi
done
werror=OFF
if [ "${CI:-}" = true ]; then werror=ON; fi
source tools/ccache-launcher.sh
cmake -S tests/cross -B "$dir" -G Ninja -DCMAKE_BUILD_TYPE=Release \
  -DCMAKE_TOOLCHAIN_FILE="$PWD/cmake/toolchains/aarch64-linux-gnu.cmake" \
  -DGYRE_WARNINGS_AS_ERRORS="$werror" "${ccache_launcher[@]}"
cmake --build "$dir" -j 2
ctest --test-dir "$dir" --output-on-failure -L cross -j 2
