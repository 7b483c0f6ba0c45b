#!/usr/bin/env bash
# Trains the default LSTM and GRU (no options but the files and --cell) on each demo corpus and
# prints the markdown rows of the "Scores of the default LSTM and GRU" table in
# corpora/demo/README.md. usage: score_defaults.sh BUILD_DIR [WORK_DIR]
set -euo pipefail
build=${1:?usage: score_defaults.sh BUILD_DIR [WORK_DIR]}
work=${2:-runs/demo-scores}
src=$(cd "$(dirname "$0")/../.." && pwd)
gyre=$build/bin/gyre
mkdir -p "$work"
pick() { sed -n "s/^  \"$1\": \([0-9.eE+-]*\),*$/\1/p" "$2" | head -1; }
# The top-level "micro" block (nlohmann/json indents it by 2; the baseline's is deeper).
span_f1() { sed -n '/^  "micro"/,/}/p' "$1" | sed -n 's/.*"f1": \([0-9.eE+-]*\).*/\1/p' | head -1; }
for corpus in intents sentiment slots; do
  for cell in lstm gru; do
    run=$work/$corpus-$cell
    rm -rf "$run"
    start=$(date +%s.%N)
    "$gyre" train --train "$src/corpora/demo/$corpus.train.tsv" --dev "$src/corpora/demo/$corpus.dev.tsv" \
      --cell "$cell" --out "$run" --quiet > /dev/null
    end=$(date +%s.%N)
    "$gyre" eval "$run" --test "$src/corpora/demo/$corpus.dev.tsv" --json "$run/dev.json" > /dev/null
    "$gyre" eval "$run" --test "$src/corpora/demo/$corpus.test.tsv" --json "$run/test.json" > /dev/null
    if [ "$corpus" = slots ]; then
      dev=$(span_f1 "$run/dev.json"); test=$(span_f1 "$run/test.json"); what="span F1"
    else
      dev=$(pick accuracy "$run/dev.json"); test=$(pick accuracy "$run/test.json"); what=accuracy
    fi
    secs=$(awk -v a="$start" -v b="$end" 'BEGIN { printf "%.0f", b - a }')
    printf '| %s (%s) | %s | %.3f | %.3f | %s s |\n' "$corpus" "$what" "$(echo $cell | tr a-z A-Z)" "$dev" "$test" "$secs"
  done
done
