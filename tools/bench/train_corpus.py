#!/usr/bin/python3
"""Seeded classification corpus for the end-to-end training benchmark (run_train_bench.sh).

Writes OUT/train.tsv and OUT/dev.tsv ("label<TAB>text" with a header line): lengths uniform in
8..64 words, a vocabulary of --vocab pseudo-words (lowercase ASCII consonant-vowel syllables, so
every tokenizer mode splits them the same way: at spaces) and 8 classes. Each class prefers its
own eighth of the vocabulary (a quarter of its tokens come from there), so the task is
learnable; the rest is uniform over the whole vocabulary. Invented data: not a check value.

  /usr/bin/python3 tools/bench/train_corpus.py --out DIR [--examples 20000] [--dev 500] [--seed 7]
"""

import argparse
import os
import random

CONSONANTS = "bdfgklmnprstvz"
VOWELS = "aeiou"
SYLLABLES = [c + v for c in CONSONANTS for v in VOWELS]  # 70
CLASSES = 8
MIN_LEN, MAX_LEN = 8, 64


def word(i):
    n = len(SYLLABLES)
    return SYLLABLES[i % n] + SYLLABLES[(i // n) % n] + SYLLABLES[(i // (n * n)) % n]


def write(path, rng, count, vocab):
    words = [word(i) for i in range(vocab)]
    with open(path, "w", encoding="utf-8") as f:
        f.write("label\ttext\n")
        for _ in range(count):
            c = rng.randrange(CLASSES)
            n = rng.randint(MIN_LEN, MAX_LEN)
            toks = []
            for _ in range(n):
                if rng.random() < 0.25:
                    toks.append(words[rng.randrange(vocab // CLASSES) * CLASSES + c])
                else:
                    toks.append(words[rng.randrange(vocab)])
            f.write(f"class{c}\t{' '.join(toks)}\n")


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", required=True)
    ap.add_argument("--examples", type=int, default=20000)
    ap.add_argument("--dev", type=int, default=500)
    ap.add_argument("--vocab", type=int, default=10000)
    ap.add_argument("--seed", type=int, default=7)
    args = ap.parse_args()
    os.makedirs(args.out, exist_ok=True)
    write(os.path.join(args.out, "train.tsv"), random.Random(args.seed), args.examples, args.vocab)
    write(os.path.join(args.out, "dev.tsv"), random.Random(args.seed + 1), args.dev, args.vocab)


if __name__ == "__main__":
    main()
