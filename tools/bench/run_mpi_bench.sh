#!/usr/bin/env bash
# Data-parallel training across MPI ranks on this machine (loopback): tokens/s for 1 process with
# 1 and 2 threads and for 2 ranks of 1 thread, the bytes each rank sends per step, and the scaling
# those bytes predict on 1 and 10 Gbit/s links (a model, not a measurement).
#   tools/bench/run_mpi_bench.sh BUILD_MPI_DIR [--hidden "128 256 512"] [--epochs 1]
# Run on an idle machine; the load average is printed before and after.
set -euo pipefail
build=${1:?usage: run_mpi_bench.sh BUILD_MPI_DIR [--hidden LIST] [--epochs N]}
shift
hidden="128 256 512"
epochs=1
while [ $# -gt 0 ]; do
  case "$1" in
    --hidden) hidden=$2; shift 2 ;;
    --epochs) epochs=$2; shift 2 ;;
    *) echo "run_mpi_bench: unknown option '$1'" >&2; exit 2 ;;
  esac
done
root=$(cd "$(dirname "$0")/../.." && pwd)
gyre=$build/bin/gyre
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT
mpirun=(mpirun --oversubscribe --mca btl_vader_single_copy_mechanism none)
if [ "$(id -u)" = 0 ]; then mpirun+=(--allow-run-as-root); fi
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
common=(--train "$root/corpora/demo/intents.train.tsv" --dev "$root/corpora/demo/intents.dev.tsv"
        --epochs "$epochs" --patience 0 --seed 1 --quiet)
field() { python3 -c "import json,sys; print(json.load(open(sys.argv[1]))[sys.argv[2]])" "$1" "$2"; }
printf '%-8s %14s %14s %14s %8s %8s %16s %12s\n' hidden "1p x 1t tok/s" "1p x 2t tok/s" "2r x 1t tok/s" \
  "2t/1t" "2r/1t" "bytes/step/rank" "step ms 1t"
for h in $hidden; do
  "$gyre" train "${common[@]}" --hidden-size "$h" --threads 1 --out "$work/t1-$h" > /dev/null
  "$gyre" train "${common[@]}" --hidden-size "$h" --threads 2 --out "$work/t2-$h" > /dev/null
  "${mpirun[@]}" -np 2 "$gyre" train "${common[@]}" --hidden-size "$h" --threads 1 --out "$work/r2-$h" > /dev/null
  t1=$(field "$work/t1-$h/metrics.json" tokens_per_second)
  t2=$(field "$work/t2-$h/metrics.json" tokens_per_second)
  r2=$(field "$work/r2-$h/metrics.json" tokens_per_second)
  bytes=$(field "$work/r2-$h/metrics.json" exchange_bytes_per_step)
  # Mean tokens per step of the 1-thread run: tokens / steps, from log.jsonl's epochs.
  step_ms=$(python3 - "$work/t1-$h" <<'PY'
import json, sys, math
run = sys.argv[1]
m = json.load(open(run + "/metrics.json"))
train_examples = m["train_examples"]
steps = math.ceil(train_examples / 32) * m["epochs"]
print(f"{1000.0 * m['seconds'] / steps:.2f}")
PY
)
  python3 - "$h" "$t1" "$t2" "$r2" "$bytes" "$step_ms" <<'PY'
import sys
h, t1, t2, r2, b, ms = sys.argv[1], *map(float, sys.argv[2:])
print(f"{h:<8} {t1:14.0f} {t2:14.0f} {r2:14.0f} {t2/t1:8.2f} {r2/t1:8.2f} {b:16.0f} {ms:12.2f}")
PY
  echo "$h $t1 $bytes $step_ms" >> "$work/model.txt"
done
echo
echo "Model (not measured): R ranks, each with one core's compute, a ring all-gather moving (R-1) x bytes"
echo "into every rank per step; step time = compute/R + transfer; efficiency = speed-up / R."
python3 - "$work/model.txt" <<'PY'
import sys
rows = [l.split() for l in open(sys.argv[1])]
print(f"{'hidden':<8} {'link':>9} " + " ".join(f"{'R=' + str(r):>8}" for r in (2, 4, 8, 16)))
for h, t1, b, ms in rows:
    b, ms = float(b), float(ms) / 1000.0
    for gbit in (1, 10):
        rate = gbit * 1e9 / 8
        eff = []
        for r in (2, 4, 8, 16):
            step = ms / r + (r - 1) * b / rate
            eff.append(ms / step / r)
        print(f"{h:<8} {str(gbit) + ' Gbit/s':>9} " + " ".join(f"{e:8.2f}" for e in eff))
PY
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
