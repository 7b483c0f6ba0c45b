#!/usr/bin/env bash
# Training cost as the corpus grows (issue 13): `gyre train` for one epoch on synthetic corpora of
# increasing size (train_corpus.py, same generator and settings as run_train_bench.sh), reporting
# the training loop's tokens/s and the process's peak RSS beside the size of the encoded corpus.
# Targets: tokens/s flat within 10% across sizes; RSS growing only with the encoded corpus.
#
#   tools/bench/run_scale_bench.sh BUILD_DIR [--sizes "10000 100000 1000000"] [--threads 1]
#                                            [--hidden 256] [--steps N] [--no-baseline] [--keep DIR]
#
# --no-baseline measures the training alone (gyre train --no-baseline --ngram-part off): no linear
# baseline and no n-gram part are fitted after training, so the process peak is reading, encoding
# and training. Without it the fit runs on at most --linear-fit-examples training examples (default
# 100000) and --linear-fit-features n-grams (README "N-gram part"), so its cost stops growing with
# the corpus past that size (tools/bench/README.md, "Training cost as the corpus grows").
#
# The 1M-example corpus is ~36M tokens (~250 MB of text); one epoch of it takes about half an hour.
# --steps N ends the epoch after N optimizer steps (gyre train --epoch-step-limit): tokens/s over
# the same number of steps for every size, while the peak RSS still covers reading and encoding the
# whole corpus, the linear fit (on its capped sample) and the end-of-run steps.
set -euo pipefail

usage() { sed -n '2,18p' "$0" | sed 's/^# \{0,1\}//'; exit 2; }
[[ $# -ge 1 ]] || usage
build_dir=$1; shift
sizes="10000 100000 1000000"
threads=1
hidden=256
steps=0
keep=
no_baseline=()
while [[ $# -gt 0 ]]; do
  case $1 in
    --sizes) sizes=$2; shift 2 ;;
    --threads) threads=$2; shift 2 ;;
    --hidden) hidden=$2; shift 2 ;;
    --steps) steps=$2; shift 2 ;;
    --keep) keep=$2; shift 2 ;;
    --no-baseline) no_baseline=(--no-baseline --ngram-part off); shift ;;
    *) usage ;;
  esac
done
here=$(cd "$(dirname "$0")" && pwd)
gyre=$build_dir/bin/gyre
[[ -x $gyre ]] || { echo "run_scale_bench: $gyre not found; build it: cmake --build $build_dir --target gyre_cli" >&2; exit 2; }
if [[ -n $keep ]]; then work=$keep; mkdir -p "$work"; else work=$(mktemp -d); trap 'rm -rf "$work"' EXIT; fi
py=/usr/bin/python3
out=$work/results.jsonl
: > "$out"
echo "== machine: $(nproc) cores, load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
for n in $sizes; do
  corpus=$work/corpus-$n
  if [[ ! -f $corpus/train.tsv ]]; then
    mkdir -p "$corpus"
    $py "$here/train_corpus.py" --out "$corpus" --examples "$n" --dev 500 --seed 7 >/dev/null
  fi
  run=$work/run-$n
  rm -rf "$run"
  /usr/bin/time -f '{"maxrss_kb": %M, "elapsed": %e, "cpu": %U, "sys": %S}' -o "$work/time-$n.json" \
    "$gyre" train --train "$corpus/train.tsv" --dev "$corpus/dev.tsv" --cell lstm --embedding-size 128 \
      --hidden-size "$hidden" --layers 1 --unidirectional --pooling mean --optimizer adam --learning-rate 0.002 \
      --batch-size 32 --epochs 1 --dropout 0 --embedding-dropout 0 --clip-norm 0 --patience 0 --seed 1 --quiet \
      --threads "$threads" --epoch-step-limit "$steps" "${no_baseline[@]}" --out "$run" >/dev/null
  $py - "$n" "$run/metrics.json" "$work/time-$n.json" "$corpus/train.tsv" "$steps" >> "$out" <<'PYEOF'
import json, os, sys
n, metrics, timing, train, steps = sys.argv[1:6]
m = json.load(open(metrics)); t = json.load(open(timing))
trained = m["seconds"] * m["tokens_per_second"]
# The corpus's tokens: train_corpus.py's pseudo-words split at spaces in every tokenizer mode.
with open(train, encoding="utf-8") as f:
    next(f)  # header
    tokens = sum(len(line.split("\t", 1)[1].split()) for line in f)
print(json.dumps({"examples": int(n), "tokens": tokens, "trained_tokens": round(trained), "steps": int(steps),
                  "tokens_per_s": m["tokens_per_second"],
                  "train_rss_bytes": m["peak_rss_bytes"], "loop_seconds": m["seconds"], "maxrss_kb": t["maxrss_kb"], "elapsed": t["elapsed"], "cpu": t["cpu"] + t["sys"],
                  "text_bytes": os.path.getsize(train),
                  # ids as int32 plus the label: the least any in-memory encoded corpus needs
                  "encoded_min_bytes": 4 * tokens + 4 * int(n)}))
PYEOF
  tail -1 "$out"
done
echo "== load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
$py - "$out" "$([[ ${#no_baseline[@]} -gt 0 ]] && echo 1 || echo 0)" <<'PYEOF'
import json, sys
rows = [json.loads(l) for l in open(sys.argv[1])]
base = rows[0]
print("{:>9} {:>11} {:>10} {:>8} {:>12} {:>12} {:>9} {:>11} {:>9} {:>9}".format(
    "examples", "tokens", "tok/s", "vs first", "train RSS MB", "proc RSS MB", "text MB", "encoded MB",
    "growth/enc", "(process)"))
for r in rows:
    extra = max(1, r["encoded_min_bytes"] - base["encoded_min_bytes"])
    growth = (r["train_rss_bytes"] - base["train_rss_bytes"]) / extra if r is not base else float("nan")
    growth_p = (r["maxrss_kb"] - base["maxrss_kb"]) * 1024 / extra if r is not base else float("nan")
    print(f"{r['examples']:>9} {r['tokens']:>11} {r['tokens_per_s']:>10.0f} {r['tokens_per_s'] / base['tokens_per_s']:>8.2f} "
          f"{r['train_rss_bytes'] / 2**20:>12.0f} {r['maxrss_kb'] / 1024:>12.0f} {r['text_bytes'] / 2**20:>9.1f} "
          f"{r['encoded_min_bytes'] / 2**20:>11.1f} {growth:>9.2f} {growth_p:>9.2f}")
flat = all(abs(r["tokens_per_s"] / base["tokens_per_s"] - 1) <= 0.10 for r in rows)
print(f"target tokens/s flat within 10%: {'met' if flat else 'MISSED'}")
if rows[0]["steps"]:
    print(f"tok/s over the first {rows[0]['steps']} optimizer steps of each run (--steps); tokens: the whole corpus")
print("train RSS: peak RSS when training ends (metrics.json peak_rss_bytes); proc RSS: the whole process "
      "(/usr/bin/time), which also covers the linear baseline fitted after training" +
      (" (not fitted in this run: --no-baseline)." if sys.argv[2] == "1" else "."))
print("growth/enc: extra peak RSS over the smallest run per extra byte of the minimal encoded corpus (int32 ids "
      "+ label); about 1 = memory follows the encoded corpus; much more = something else grows with the corpus "
      "(raw text kept, per-example containers).")
PYEOF
