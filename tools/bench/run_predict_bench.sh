#!/usr/bin/env bash
# Prediction throughput: lines/s of `gyre predict` at 1 and 2 threads for the demo models (an
# intents classifier and a slots tagger). See tools/bench/README.md ("Prediction throughput").
#
#   tools/bench/run_predict_bench.sh BUILD_DIR [--lines 50000] [--threads "1 2"] [--batch-size 64]
#                                              [--epochs 3] [--keep DIR]
#
# BUILD_DIR is an existing Release build that contains bin/gyre (this script builds nothing).
# With --keep DIR the trained models are kept in DIR and reused by the next run.
set -euo pipefail

usage() { sed -n '2,9p' "$0" | sed 's/^# \{0,1\}//'; exit 2; }
[[ $# -ge 1 ]] || usage
build_dir=$1; shift
lines=50000
thread_counts="1 2"
batch_size=64
epochs=3
keep=
while [[ $# -gt 0 ]]; do
  case $1 in
    --lines) lines=$2; shift 2 ;;
    --threads) thread_counts=$2; shift 2 ;;
    --batch-size) batch_size=$2; shift 2 ;;
    --epochs) epochs=$2; shift 2 ;;
    --keep) keep=$2; shift 2 ;;
    *) usage ;;
  esac
done

here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../.." && pwd)
demo=$root/corpora/demo
gyre=$build_dir/bin/gyre
[[ -x $gyre ]] || { echo "run_predict_bench: $gyre not found; build it: cmake --build $build_dir --target gyre_cli" >&2; exit 2; }
source "$here/bench_env.sh"
bench_check_release "$build_dir" run_predict_bench

work=${keep:-$(mktemp -d)}
mkdir -p "$work"
[[ -n $keep ]] || trap 'rm -rf "$work"' EXIT

echo "== machine"
echo "cpu: $(sed -n 's/^model name\s*: //p' /proc/cpuinfo | head -1), $(nproc) cores"
echo "load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
echo "gyre: $gyre (Release), batch size $batch_size, $lines input lines per model"

# Models: default settings (intents: LSTM classifier; slots: bidirectional LSTM tagger with a
# CRF), a few epochs; reused when --keep DIR already holds them.
train_model() {  # name corpus extra-flags...
  local name=$1 corpus=$2; shift 2
  if [[ ! -f $work/$name/selected.bin ]]; then
    rm -rf "${work:?}/$name"
    "$gyre" train --train "$demo/$corpus.train.tsv" --dev "$demo/$corpus.dev.tsv" --epochs "$epochs" \
      --quiet --out "$work/$name" "$@" >/dev/null
  fi
}
train_model intents intents
train_model slots slots --output crf

# Inputs: the demo test texts repeated up to $lines lines.
# intents.test.tsv is "label<TAB>text" with a header; slots.test.tsv is token<TAB>tag columns,
# sentences separated by blank lines (joined with spaces here).
tail -n +2 "$demo/intents.test.tsv" | cut -f2- >"$work/intents.one"
awk -F'\t' 'NF == 0 || $0 == "" { if (s != "") print s; s = ""; next } { s = (s == "" ? $1 : s " " $1) }
            END { if (s != "") print s }' "$demo/slots.test.tsv" >"$work/slots.one"
for name in intents slots; do
  : >"$work/$name.input"
  while [[ $(wc -l <"$work/$name.input") -lt $lines ]]; do cat "$work/$name.one" >>"$work/$name.input"; done
  head -n "$lines" "$work/$name.input" >"$work/$name.tmp" && mv "$work/$name.tmp" "$work/$name.input"
done

results=$work/results.tsv
: >"$results"
for name in intents slots; do
  tokens=$(wc -w <"$work/$name.input")
  for threads in $thread_counts; do
    /usr/bin/time -f '%e %U %S %M' -o "$work/time.txt" \
      "$gyre" predict "$work/$name" --input "$work/$name.input" --batch-size "$batch_size" \
      --threads "$threads" >"$work/$name.$threads.out"
    out_lines=$(wc -l <"$work/$name.$threads.out")
    [[ $out_lines == "$lines" ]] || { echo "run_predict_bench: $name: $out_lines output lines for $lines input lines" >&2; exit 1; }
    read -r elapsed user sys rss <"$work/time.txt"
    echo -e "$name\t$threads\t$elapsed\t$user\t$sys\t$rss\t$tokens" | tee -a "$results"
  done
  for threads in $thread_counts; do
    cmp -s "$work/$name.1.out" "$work/$name.$threads.out" 2>/dev/null ||
      { [[ -f $work/$name.1.out ]] && echo "run_predict_bench: $name: --threads $threads output differs from 1 thread" >&2 && exit 1; }
  done
done
echo "load average after: $(cut -d' ' -f1-3 /proc/loadavg)"

echo "== summary (whole process: model loading, reading, tokenizing, inference, writing)"
/usr/bin/python3 - "$results" "$lines" <<'PYEOF'
import sys
rows = [l.split("\t") for l in open(sys.argv[1]).read().splitlines() if l]
lines = int(sys.argv[2])
base = {}
print("{:<8} {:>3} {:>9} {:>10} {:>12} {:>12} {:>8} {:>8}".format(
    "model", "thr", "seconds", "lines/s", "lines/cpu-s", "words/s", "scaling", "RSS"))
for name, thr, elapsed, user, sys_, rss, words in rows:
    wall, cpu = float(elapsed), float(user) + float(sys_)
    lps = lines / wall
    base.setdefault(name, lps)
    print(f"{name:<8} {thr:>3} {wall:>9.2f} {lps:>10.0f} {lines / cpu:>12.0f} {int(words) / wall:>12.0f} "
          f"{lps / base[name]:>8.2f} {int(rss) / 1024:>6.0f}MB")
print("lines/s and words/s by wall clock; lines/cpu-s per CPU second of the process (all threads).")
print("Outputs at every thread count were compared byte for byte with the 1-thread output (equal).")
PYEOF
