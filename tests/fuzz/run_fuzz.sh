#!/usr/bin/env bash
# Builds the model-loader fuzzer with clang (-fsanitize=fuzzer,address,undefined) and runs it
# for a bounded time on a seed corpus of valid small model files.
#   tests/fuzz/run_fuzz.sh [SECONDS=60] [WORK_DIR=build-fuzz]
# The runtime is built without ICU here (whitespace tokenizer only), which all seeds use.
# A crash leaves its input in WORK_DIR/artifacts/: copy it to tests/fixtures/runtime/regress/
# (test_regressions.cpp then loads it in every test run) and fix the loader.
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-60}
work=${2:-build-fuzz}
cxx=${FUZZ_CXX:-clang++}
if ! command -v "$cxx" > /dev/null; then
  echo "fuzz: $cxx not found; skipped"
  exit 77
fi
mkdir -p "$work/corpus" "$work/artifacts"
if ! echo 'extern "C" int LLVMFuzzerTestOneInput(const char*, unsigned long) { return 0; }' |
    "$cxx" -x c++ -fsanitize=fuzzer -o "$work/probe" - 2> /dev/null; then
  echo "fuzz: $cxx cannot link libFuzzer (install clang's runtime libraries); skipped"
  exit 77
fi
srcs=(src/runtime/*.cpp src/runtime/detail/*.cpp tests/fuzz/fuzz_model_loader.cpp)
bin="$work/fuzz_model_loader"
if [ ! -x "$bin" ] || [ -n "$(find "${srcs[@]}" include/gyre/runtime -newer "$bin" 2>/dev/null | head -1)" ]; then
  echo "fuzz: building $bin with $cxx"
  "$cxx" -std=c++17 -O1 -g -fno-omit-frame-pointer -fsanitize=fuzzer,address,undefined \
    -fno-sanitize-recover=undefined -Iinclude -Isrc "${srcs[@]}" -o "$bin"
fi
# Seeds: the committed fixture models and earlier regressions.
cp tests/fixtures/runtime/*.gyre "$work/corpus/" 2>/dev/null || true
if compgen -G "tests/fixtures/runtime/regress/*" > /dev/null; then
  echo "fuzz: replaying regressions"
  "$bin" tests/fixtures/runtime/regress/*
fi
echo "fuzz: running for ${seconds} s"
ASAN_OPTIONS=detect_leaks=1:allocator_may_return_null=0 UBSAN_OPTIONS=print_stacktrace=1 \
  "$bin" -max_total_time="$seconds" -max_len=16384 -rss_limit_mb=2048 -malloc_limit_mb=64 -timeout=10 \
  -artifact_prefix="$work/artifacts/" -print_final_stats=1 "$work/corpus"
