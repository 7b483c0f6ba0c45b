#!/usr/bin/python3
"""Checks tools/datasets/convert.py's split rule and brown-genre's rotations (stdlib only).

usage: convert_rotations_test.py SOURCE_DIR
- rotation 0 is the documented rule (first 4 bytes of SHA-256, big-endian, mod 10: 0-7 train,
  8 dev, 9 test), computed here independently;
- over rotations 0..9 every key is in test exactly once, in dev exactly once, in train 8 times;
- convert_brown_genre on a small invented corpus writes the split and its 9 rotations, each a
  partition of all passages, test of rotation R = the documents of bucket (9 + R) % 10.
"""
import contextlib
import hashlib
import io
import os
import sys
import tempfile

sys.path.insert(0, os.path.join(sys.argv[1], "tools", "datasets"))
import convert  # noqa: E402

failures = 0


def check(ok, what):
    global failures
    if not ok:
        failures += 1
        print(f"FAIL: {what}")


def documented(key):
    b = int.from_bytes(hashlib.sha256(key.encode("utf-8")).digest()[:4], "big") % 10
    return "train" if b <= 7 else "dev" if b == 8 else "test"


keys = [f"k{i}" for i in range(2000)] + ["ca01", "cr09", "\u00e9t\u00e9"]
for key in keys:
    check(convert.bucket(key) == documented(key), f"rotation 0 of {key!r} is not the documented rule")
    seen = [convert.bucket(key, r) for r in range(convert.ROTATIONS)]
    check((seen.count("test"), seen.count("dev"), seen.count("train")) == (1, 1, 8),
          f"{key!r} over the rotations: {seen}")

# A small invented corpus in the Brown layout (word/tag tokens, cats.txt): 40 files, 2 passages
# each (two sentences of MIN_PASSAGE_TOKENS tokens).
with tempfile.TemporaryDirectory() as tmp:
    pkg = os.path.join(tmp, "package")
    os.makedirs(pkg)
    n = convert.MIN_PASSAGE_TOKENS
    files = [f"xx{i:02d}" for i in range(40)]
    with open(os.path.join(pkg, "cats.txt"), "w", encoding="ascii") as f:
        for i, fid in enumerate(files):
            f.write(f"{fid} {['news', 'lore', 'romance'][i % 3]}\n")
            with open(os.path.join(pkg, fid), "w", encoding="ascii") as doc:
                for s in range(2):
                    doc.write(" ".join(f"w{fid}s{s}t{t}/nn" for t in range(n)) + "\n\n")
    out = os.path.join(tmp, "out")
    with contextlib.redirect_stdout(io.StringIO()):
        convert.convert_brown_genre(pkg, out)

    def rows(path):
        with open(path, encoding="utf-8") as f:
            lines = f.read().split("\n")
        check(lines[0] == "label\ttext" and lines[-1] == "", f"{path}: header or final newline")
        return [line for line in lines[1:] if line]

    everything = None
    for r in range(convert.ROTATIONS):
        d = out if r == 0 else os.path.join(out, f"rotation-{r}")
        split = {s: rows(os.path.join(d, f"{s}.tsv")) for s in ("train", "dev", "test")}
        union = sorted(split["train"] + split["dev"] + split["test"])
        check(len(union) == 2 * len(files) and len(set(union)) == len(union), f"rotation {r} is not a partition")
        everything = everything or union
        check(union == everything, f"rotation {r} holds other passages")
        in_test = [fid for fid in files
                   if int.from_bytes(hashlib.sha256(fid.encode()).digest()[:4], "big") % 10 == (9 + r) % 10]
        want = sorted(row for row in union if any(row.split("\t")[1].startswith(f"w{fid}s") for fid in in_test))
        check(sorted(split["test"]) == want, f"rotation {r}: test is not bucket {(9 + r) % 10}")

print("convert rotations:", "FAILED" if failures else "ok", f"({len(keys)} keys, {convert.ROTATIONS} rotations)")
sys.exit(1 if failures else 0)
