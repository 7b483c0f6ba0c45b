#!/usr/bin/env bash
# What embedding the gyre runtime costs a program (README "Embedding the runtime"):
#   1. code + data the runtime adds to a program (static runtime library, C/C++ libraries shared):
#      x86-64 with ICU (the main build), x86-64 without ICU and aarch64 without ICU (tests/cross);
#   2. memory to load a demo-size model beyond its mapped file, and per Context;
#   3. the ICU libraries the words/chars tokenizers need, against the no-ICU runtime.
#   bash tools/footprint.sh [MAIN_BUILD] [HOST_RUNTIME_BUILD] [AARCH64_BUILD]
# defaults build, build-runtime, build-aarch64. Builds what is missing (2 compiler jobs).
set -euo pipefail
cd "$(dirname "$0")/.."
main="${1:-build}"
host="${2:-build-runtime}"
cross="${3:-build-aarch64}"
[ -f "$main/CMakeCache.txt" ] || { echo "footprint: configure the main build in $main first (README)" >&2; exit 1; }
cmake --build "$main" -j 2 --target footprint_probe footprint_baseline runtime_memory_probe
[ -f "$host/CMakeCache.txt" ] || cmake -S tests/cross -B "$host" -G Ninja -DCMAKE_BUILD_TYPE=Release
cmake --build "$host" -j 2 --target footprint_probe footprint_baseline runtime_memory_probe
[ -f "$cross/CMakeCache.txt" ] || cmake -S tests/cross -B "$cross" -G Ninja -DCMAKE_BUILD_TYPE=Release \
  -DCMAKE_TOOLCHAIN_FILE="$PWD/cmake/toolchains/aarch64-linux-gnu.cmake"
cmake --build "$cross" -j 2 --target footprint_probe footprint_baseline runtime_memory_probe

echo "== code the runtime adds (loaded sections, tools/footprint.py) =="
python3 tools/footprint.py "$main"/tests/footprint_probe "$main"/tests/footprint_baseline --label "x86-64, ICU"
python3 tools/footprint.py "$host"/footprint_probe "$host"/footprint_baseline --label "x86-64, no ICU"
python3 tools/footprint.py "$cross"/footprint_probe "$cross"/footprint_baseline --label "aarch64, no ICU"
for b in "$main"/tests "$host" "$cross"; do
  s=$(mktemp)
  strip -o "$s" "$b/footprint_probe" 2>/dev/null || aarch64-linux-gnu-strip -o "$s" "$b/footprint_probe"
  t=$(mktemp)
  strip -o "$t" "$b/footprint_baseline" 2>/dev/null || aarch64-linux-gnu-strip -o "$t" "$b/footprint_baseline"
  echo "stripped file sizes ($b): probe $(stat -c %s "$s") bytes, baseline $(stat -c %s "$t") bytes"
  rm -f "$s" "$t"
done

echo "== memory: demo-size model (runtime_memory_probe) =="
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
echo "x86-64, ICU:"; "$main"/bench/runtime_memory_probe "$tmp"
echo "x86-64, no ICU:"; "$host"/runtime_memory_probe "$tmp"
echo "aarch64, no ICU (qemu):"; qemu-aarch64 -L /usr/aarch64-linux-gnu "$cross"/runtime_memory_probe "$tmp"

echo "== shared libraries the ICU runtime needs (x86-64) =="
ldd "$main"/tests/footprint_probe | awk '/icu/ { print $3 }' | while read -r lib; do
  real=$(readlink -f "$lib")
  echo "$(basename "$real"): $(stat -c %s "$real") bytes"
done
echo "no-ICU runtime: $(ldd "$host"/footprint_probe | grep -c icu || true) ICU libraries"
