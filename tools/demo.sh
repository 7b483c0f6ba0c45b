#!/usr/bin/env bash
# The main job on the demo corpus, end to end: install what is needed, build, train an LSTM and a
# GRU intent classifier, evaluate both on the held-out test set, export the better one as int8,
# and run the embedded-runtime demo program on a few messages. Safe to run again (it starts the
# demo runs afresh each time). Runs in a few minutes on 2 cores.
set -euo pipefail
cd "$(dirname "$0")/.."
bash tools/install-deps.sh
build=${GYRE_BUILD_DIR:-build}   # where to build (default build/)
cmake -S . -B "$build" -G Ninja -DCMAKE_BUILD_TYPE=Release
cmake --build "$build"
gyre=$build/bin/gyre
corpus=corpora/demo
rm -rf runs/demo-intents-lstm runs/demo-intents-gru
mkdir -p runs

echo; echo "== vocabulary and corpus statistics"
$gyre vocab --train $corpus/intents.train.tsv --dev $corpus/intents.dev.tsv --out runs/demo-vocab.json

for cell in lstm gru; do
  echo; echo "== train a $cell intent classifier"
  $gyre train --train $corpus/intents.train.tsv --dev $corpus/intents.dev.tsv --cell $cell \
    --out runs/demo-intents-$cell
done

for cell in lstm gru; do
  echo; echo "== evaluate the $cell classifier on the test set"
  $gyre eval runs/demo-intents-$cell --test $corpus/intents.test.tsv --json runs/demo-intents-$cell/test-metrics.json \
    --errors 3
done

echo; echo "== export the LSTM classifier as int8 and inspect it"
$gyre export runs/demo-intents-lstm --out runs/demo-intents.gyre --precision int8
$gyre inspect runs/demo-intents.gyre | head -12

echo; echo "== build tools/embed-demo against the installed runtime and classify a few messages"
cmake --install "$build" --prefix "$build/install" > /dev/null
cmake -S tools/embed-demo -B "$build/embed-demo" -G Ninja -DCMAKE_PREFIX_PATH="$PWD/$build/install" > /dev/null
cmake --build "$build/embed-demo" > /dev/null
messages='my dishwasher is leaking again, can someone come on thursday morning?
please cancel the visit booked for friday, the fridge is working now
the invoice charged me twice for the callout fee
Ayla fixed our oven in twenty minutes, brilliant service'
echo "$messages" | "$build/embed-demo/embed-demo" runs/demo-intents.gyre
echo; echo "== the same messages through gyre predict (the training library)"
echo "$messages" | $gyre predict runs/demo-intents-lstm
