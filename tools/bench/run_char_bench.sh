#!/usr/bin/env bash
# Cost of the character encoder (issue 12 item 1): the demo slot tagger trained with and without
# it (same settings otherwise), then training tokens/s and `gyre bench` latency/throughput of its
# f32 and int8 files, side by side with the ratio. See tools/bench/README.md ("Character encoder").
#
#   tools/bench/run_char_bench.sh BUILD_DIR [--seconds S] [--threads 1,2] [--epochs 3] [--keep DIR]
#
# BUILD_DIR is an existing Release build that contains bin/gyre (this script builds nothing).
# `gyre bench` feeds a character-encoder model token strings (their normalization and character
# lookup are timed, as an application's calls would be); the plain model gets token ids.
set -euo pipefail

usage() { sed -n '2,10p' "$0" | sed 's/^# \{0,1\}//'; exit 2; }
[[ $# -ge 1 ]] || usage
build_dir=$1; shift
seconds=2
threads=1,2
epochs=3
keep=
while [[ $# -gt 0 ]]; do
  case $1 in
    --seconds) seconds=$2; shift 2 ;;
    --threads) threads=$2; shift 2 ;;
    --epochs) epochs=$2; shift 2 ;;
    --keep) keep=$2; shift 2 ;;
    *) usage ;;
  esac
done

here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
demo=$root/corpora/demo
gyre=$build_dir/bin/gyre
py=/usr/bin/python3
[[ -x $gyre ]] || { echo "run_char_bench: $gyre not found; build it: cmake --build $build_dir --target gyre_cli" >&2; exit 2; }
source "$here/bench_env.sh"
bench_check_release "$build_dir" run_char_bench

work=${keep:-$(mktemp -d)}
mkdir -p "$work"
[[ -n $keep ]] || trap 'rm -rf "$work"' EXIT

echo "== machine"
bench_print_machine
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"

for side in plain chars; do
  flag=--no-char-encoder
  [[ $side == chars ]] && flag=--char-encoder
  if [[ ! -f $work/$side/selected.bin ]]; then
    rm -rf "${work:?}/$side"
    "$gyre" train --train "$demo/slots.train.tsv" --dev "$demo/slots.dev.tsv" --epochs "$epochs" --patience 0 \
      --threads 1 $flag --out "$work/$side" >"$work/$side.train.txt"
  fi
  for p in f32 int8; do
    [[ -f $work/$side.$p.gyre ]] || "$gyre" export "$work/$side" --out "$work/$side.$p.gyre" --precision "$p" --no-check
    echo "== gyre bench $side.$p.gyre --threads $threads"
    "$gyre" bench "$work/$side.$p.gyre" --threads "$threads" --seconds "$seconds" | tee "$work/$side.$p.bench.txt"
  done
done
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"

echo "== summary (ratio = with characters / without)"
$py - "$work" "$threads" <<'PYEOF'
import re, sys
work, threads = sys.argv[1], sys.argv[2].split(",")
def train_rate(side):
    return float(re.search(r"tokens/s\s+([\d.]+)", open(f"{work}/{side}.train.txt").read())[1])
def bench(side, p):
    text = open(f"{work}/{side}.{p}.bench.txt").read()
    out = {}
    for m in re.finditer(r"threads (\d+)\s+latency \(\d+ tokens\): p50 ([\d.]+) us.*?\n"
                         r"\s+throughput \(batch \d+\): ([\d.]+) texts/s", text):
        out[m[1]] = (float(m[2]), float(m[3]))
    return out
a, b = train_rate("plain"), train_rate("chars")
print(f"training tokens/s (1 thread): without {a:.0f}, with {b:.0f}, ratio {b / a:.2f}")
for p in ("f32", "int8"):
    x, y = bench("plain", p), bench("chars", p)
    for t in threads:
        if t in x and t in y:
            print(f"{p:4} threads {t}: p50 latency {x[t][0]:.1f} -> {y[t][0]:.1f} us (x{y[t][0] / x[t][0]:.2f}), "
                  f"throughput {x[t][1]:.0f} -> {y[t][1]:.0f} texts/s (x{y[t][1] / x[t][1]:.2f})")
PYEOF
