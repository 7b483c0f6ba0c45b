#!/usr/bin/env bash
# Instructions executed per recurrent step (token) of the aarch64 runtime, per kernel set, counted
# under qemu-user: speed cannot be measured under emulation, instruction counts can. qemu runs
# one guest instruction per translation block (-singlestep) with block chaining off
# (-d exec,nochain), so its exec log has one line per executed instruction.
# The model: tools/bench/runtime_step_probe.cpp (LSTM, embedding 64, hidden 64).
#   bash tools/bench/count_insns_qemu.sh [CROSS_BUILD_DIR]   (default build-aarch64, made by
#   tools/cross-test.sh)
set -euo pipefail
cd "$(dirname "$0")/../.."
dir="${1:-build-aarch64}"
probe="$dir/runtime_step_probe"
[ -x "$probe" ] || { echo "count_insns_qemu: $probe not built (run tools/cross-test.sh first)" >&2; exit 1; }
n1=10
n2=50
count() {  # dtype cap steps -> executed instructions of the whole run
  GYRE_RUNTIME_ISA="$2" qemu-aarch64 -L /usr/aarch64-linux-gnu -singlestep -d exec,nochain -D /dev/stdout \
    "$probe" "$1" "$3" | grep -c '^Trace'
}
printf '%-6s %-10s %12s\n' dtype kernels 'instr/token'
for dtype in f32 i8; do
  for cap in portable neon sdot; do
    [ "$dtype" = f32 ] && [ "$cap" = sdot ] && continue  # SDOT changes only the int8 kernels
    a=$(count "$dtype" "$cap" "$n1")
    b=$(count "$dtype" "$cap" "$n2")
    name=$(GYRE_RUNTIME_ISA="$cap" qemu-aarch64 -L /usr/aarch64-linux-gnu "$probe" "$dtype" 1 | sed 's/.*kernels=\([^ ]*\).*/\1/')
    awk -v d="$dtype" -v k="$name" -v a="$a" -v b="$b" -v n="$((n2 - n1))" 'BEGIN { printf "%-6s %-10s %12.1f\n", d, k, (b - a) / n }'
  done
done
