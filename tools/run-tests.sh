#!/usr/bin/env bash
# Installs dependencies, builds gyre in build/ and runs every test (all ctest labels).
# This is the README's test command and what .ci/run calls.
set -euo pipefail
cd "$(dirname "$0")/.."
bash tools/install-deps.sh
werror=OFF
if [ "${CI:-}" = true ]; then werror=ON; fi
# ccache (when installed) lets a second build tree of the same sources (CI's MPI build) reuse these
# objects; CCACHE_BASEDIR makes the cached commands independent of the build directory's name.
launcher=()
if command -v ccache >/dev/null 2>&1; then
  export CCACHE_BASEDIR="$PWD"
  launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache -DCMAKE_C_COMPILER_LAUNCHER=ccache)
fi
cmake -S . -B build -G Ninja -DCMAKE_BUILD_TYPE=Release -DGYRE_WARNINGS_AS_ERRORS="$werror" "${launcher[@]}"
cmake --build build
ctest --test-dir build --output-on-failure --timeout 1800 -j 2
