#!/usr/bin/env bash
# Writes the output of `gyre options` (every option of every command, from the commands' own
# definitions) into README.md between the option-table markers. The ctest test
# "README option table is gyre options" fails until this has been run after an option change.
# Usage: tools/update_readme_options.sh [path/to/gyre]   (default: build/bin/gyre)
set -euo pipefail
cd "$(dirname "$0")/.."
gyre="${1:-build/bin/gyre}"
table="$("$gyre" options)"
/usr/bin/python3 - "$table" <<'PY'
import sys
begin, end = "<!-- gyre options: begin -->", "<!-- gyre options: end -->"
text = open("README.md", encoding="utf-8").read()
if begin not in text or end not in text:
    sys.exit("README.md has no option-table markers (%s ... %s)" % (begin, end))
head, rest = text.split(begin, 1)
_, tail = rest.split(end, 1)
open("README.md.tmp", "w", encoding="utf-8").write(head + begin + "\n" + sys.argv[1] + "\n" + end + tail)
PY
mv README.md.tmp README.md
echo "README.md: option table updated"
