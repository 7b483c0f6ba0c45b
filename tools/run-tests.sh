#!/usr/bin/env bash
# Installs dependencies, builds gyre in build/ and runs every test (all ctest labels).
# This is the README's test command and what .ci/run calls.
set -euo pipefail
cd "$(dirname "$0")/.."
bash tools/install-deps.sh
werror=OFF
if [ "${CI:-}" = true ]; then werror=ON; fi
# ccache (when installed) lets a second build tree of the same sources (CI's MPI build) reuse these
# objects.
source tools/ccache-launcher.sh
cmake -S . -B build -G Ninja -DCMAKE_BUILD_TYPE=Release -DGYRE_WARNINGS_AS_ERRORS="$werror" \
  "${ccache_launcher[@]}"
cmake --build build
ctest --test-dir build --output-on-failure --timeout 1800 -j 2
