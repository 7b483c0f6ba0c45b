#!/usr/bin/python3
"""Linear baselines with python3-sklearn on the splits made by tools/datasets/fetch_and_convert.sh.

Usage: /usr/bin/python3 tools/datasets/baselines.py DATA_DIR [OUT_JSON]
  DATA_DIR  holds names/, brown-genre/, brown-names/ and spam/ (each train/dev/test.tsv)
  OUT_JSON  default tests/fixtures/datasets/baselines.json (relative to the source tree)

Made with Debian's python3-sklearn 1.2.1. For every dataset two things are recorded:
 1. "gyre_mirror": gyre's own linear baseline (src/eval/linear_baseline.cpp) rebuilt with
    sklearn on the same features, for the check that gyre's solver reaches the same scores
    (tests/external/datasets_check.sh, within 0.005):
      classifiers: token n-grams of orders 1..N of the tokens gyre feeds the model (gyre's
        runtime::ngram_keys, include/gyre/runtime/ngram_part.hpp: the tokens, then for n >= 2 every
        n consecutive items of the token list padded with "\\x02" before and "\\x03" after, joined
        by "\\x01"; N = gyre's auto ngram_order: 4 for names' `chars` tokens, 2 for brown-genre),
        kept if in >= 2 training examples (CountVectorizer(min_df=2)), value 1 + ln(count)
        then L2-normalised (TfidfVectorizer(use_idf=False, sublinear_tf=True, norm="l2"));
        LogisticRegression(C, lbfgs, max_iter=5000, tol=1e-8), C from {1, 10, 100} by dev
        accuracy (first best). Tokens: `chars` tokenizer for names (NFKC, case-folded grapheme
        clusters: list(casefold(nfkc(text))) for these ASCII names), `whitespace` tokenizer for
        brown-genre (nfkc(text).casefold().split()); spam is not mirrored (its raw mail text needs
        the UAX #29 word tokenizer).
      taggers: one-hot w-1/w0/w+1 (NFKC + case-folded tokens, <s>/</s> outside) and s-1/s0/s+1
        (ASCII word shape of the un-folded token: A-Z->X, a-z->x, 0-9->d, other kept, runs cut
        to 2), DictVectorizer, same LogisticRegression, C by dev span F1.
 2. "candidates" and "best": several common linear baselines; the one with the best dev score
    is "best", and its test score is the bar gyre's models are held to:
      classifiers: MultinomialNB(alpha=1) on word 1-2-gram counts; LogisticRegression on word
        1-2-gram tf-idf (sublinear tf, l2) with C in {1, 10, 100}; for names also on character
        1-4-grams (char_wb) tf-idf. Word tokens: sklearn's default pattern, lower-cased.
      taggers: the mirror's features, and the mirror's plus prefixes and suffixes of length 1-3
        and is-capitalised/has-digit flags of the current token, C in {1, 10, 100}.
brown-genre also gets "rotations": the same candidates on convert.py's 10 rotations of its split
(a 10-fold cross-validation by document: every Brown file is in test once), with the pooled dev and
test accuracy of each; the candidate with the best pooled dev accuracy is the bar there
(tests/external/datasets_check.sh; README "Defaults against a linear baseline, on open data").
gyre bounds its fit (--linear-fit-examples, default 100000 training examples; --linear-fit-features,
default 200000 n-grams; README "N-gram part"); the mirror has no such caps because no dataset here
reaches them (largest: names 6372 examples, brown-genre 111302 n-grams with gyre's default
tokenizer and 109163 with the mirror's, spam 105376). tests/external/datasets_check.sh fails if a
mirror run's metrics.json says a cap applied, so this stays true or the mirror must change.
Span F1 reads BIO with the CoNLL-2000 rules (an I-x after O or another type opens a span), as
gyre's tag_scheme.cpp does. Each split file's SHA-256 is recorded so a test can confirm it scores
the very same split. Datasets absent from DATA_DIR keep their entries from an existing OUT_JSON (so
one dataset can be refreshed without fetching the others).
"""

import hashlib
import json
import os
import platform
import sys
import unicodedata
import warnings

import sklearn
from sklearn.exceptions import ConvergenceWarning
from sklearn.feature_extraction import DictVectorizer
from sklearn.feature_extraction.text import CountVectorizer, TfidfVectorizer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import accuracy_score, f1_score
from sklearn.naive_bayes import MultinomialNB

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import convert  # noqa: E402  (the split rule's rotation count)

GRID = (1.0, 10.0, 100.0)


def sha256(path):
    with open(path, "rb") as f:
        return hashlib.sha256(f.read()).hexdigest()


def read_tsv(path):
    labels, texts = [], []
    with open(path, encoding="utf-8") as f:
        lines = f.read().split("\n")
    if lines[0] != "label\ttext":
        sys.exit(f"{path}:1: expected the header 'label<TAB>text'")
    for number, line in enumerate(lines[1:], start=2):
        if not line:
            continue
        label, sep, text = line.partition("\t")
        if not sep:
            sys.exit(f"{path}:{number}: expected label<TAB>text")
        labels.append(label)
        texts.append(text)
    return labels, texts


def read_columns(path):
    sentences, tokens, tags = [], [], []
    with open(path, encoding="utf-8") as f:
        for number, line in enumerate(f, start=1):
            line = line.rstrip("\n")
            if not line:
                if tokens:
                    sentences.append((tokens, tags))
                tokens, tags = [], []
                continue
            token, sep, tag = line.partition("\t")
            if not sep:
                sys.exit(f"{path}:{number}: expected token<TAB>tag")
            tokens.append(token)
            tags.append(tag)
    if tokens:
        sentences.append((tokens, tags))
    return sentences


def fold(text):
    return unicodedata.normalize("NFKC", text).casefold()


def ngrams(tokens, order):
    """gyre's runtime::ngram_keys (include/gyre/runtime/ngram_part.hpp): bytes 0x01-0x04 of a
    token are escaped as 0x04 then 'A'..'D' (characters, here: U+0001-U+0004 are those bytes)."""
    tokens = ["".join("\x04" + chr(ord("A") + ord(ch) - 1) if "\x01" <= ch <= "\x04" else ch for ch in t)
              for t in tokens]
    out = list(tokens)
    if not tokens:
        return out
    padded = ["\x02"] + list(tokens) + ["\x03"]
    for n in range(2, order + 1):
        out += ["\x01".join(padded[i:i + n]) for i in range(len(padded) - n + 1)]
    return out


def macro_f1(gold, predicted):
    return float(f1_score(gold, predicted, average="macro", labels=sorted(set(gold) | set(predicted))))


def fit_lr(x, y, c):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        return LogisticRegression(C=c, solver="lbfgs", max_iter=5000, tol=1e-8).fit(x, y)


def classifier_scores(model, x, y):
    p = model.predict(x)
    return {"accuracy": round(float(accuracy_score(y, p)), 6), "macro_f1": round(macro_f1(y, p), 6)}


def grid(make_features, data, metric, scorer, fitter=fit_lr):
    """Fits for every C, returns (best C, dev scores, test scores)."""
    x = make_features()
    best = None
    for c in GRID:
        model = fitter(x["train"], data["train"], c)
        dev = scorer(model, x["dev"], data["dev"])
        if best is None or dev[metric] > best[1][metric] + 1e-12:
            best = (c, dev, scorer(model, x["test"], data["test"]))
    return best


def classification(name, split_dir, mirror_tokens, mirror_order=2):
    raw = {s: read_tsv(os.path.join(split_dir, f"{s}.tsv")) for s in ("train", "dev", "test")}
    y = {s: raw[s][0] for s in raw}
    texts = {s: raw[s][1] for s in raw}
    out = {"candidates": {}}

    if mirror_tokens is not None:
        def mirror():
            vec = TfidfVectorizer(analyzer=lambda t: ngrams(mirror_tokens(t), mirror_order), min_df=2, use_idf=False,
                                  sublinear_tf=True, norm="l2")
            x = {"train": vec.fit_transform(texts["train"])}
            x.update({s: vec.transform(texts[s]) for s in ("dev", "test")})
            return x
        c, dev, test = grid(mirror, y, "accuracy", classifier_scores)
        out["gyre_mirror"] = {"c": c, "dev": dev, "test": test}
        out["candidates"]["lr_gyre_mirror"] = {
            "model": f"LogisticRegression(C={c}) on gyre's baseline features (the mirror)", "dev": dev, "test": test}
        print(f"{name}: gyre mirror C={c} dev {dev} test {test}", flush=True)

    def words(vec):
        def make():
            x = {"train": vec.fit_transform(texts["train"])}
            x.update({s: vec.transform(texts[s]) for s in ("dev", "test")})
            return x
        return make

    counts = words(CountVectorizer(ngram_range=(1, 2)))()
    nb = MultinomialNB(alpha=1.0).fit(counts["train"], y["train"])
    out["candidates"]["nb_word12_counts"] = {
        "model": "MultinomialNB(alpha=1) on CountVectorizer(ngram_range=(1,2))",
        "dev": classifier_scores(nb, counts["dev"], y["dev"]),
        "test": classifier_scores(nb, counts["test"], y["test"])}
    c, dev, test = grid(words(TfidfVectorizer(ngram_range=(1, 2), sublinear_tf=True)), y, "accuracy",
                        classifier_scores)
    out["candidates"]["lr_word12_tfidf"] = {
        "model": f"LogisticRegression(C={c}) on TfidfVectorizer(ngram_range=(1,2), sublinear_tf=True)",
        "dev": dev, "test": test}
    if name == "names":
        c, dev, test = grid(words(TfidfVectorizer(analyzer="char_wb", ngram_range=(1, 4), sublinear_tf=True)),
                            y, "accuracy", classifier_scores)
        out["candidates"]["lr_char14_tfidf"] = {
            "model": f"LogisticRegression(C={c}) on TfidfVectorizer(analyzer='char_wb', ngram_range=(1,4), "
                     "sublinear_tf=True)", "dev": dev, "test": test}
    return out


def rotations(split_dir, entry0, mirror):
    """brown-genre's 10-fold cross-validation by document (convert.py's rotations 0..9; rotation 0
    is split_dir itself, already scored in entry0): every candidate fitted on each rotation with C
    chosen on that rotation's dev, as above. Pooled accuracy = right answers summed over the
    rotations / examples summed (every document is in test once and in dev once). "best" is the
    candidate with the best pooled dev accuracy (first best); its pooled test accuracy is the bar."""
    per = []
    sha = {}
    for r in range(convert.ROTATIONS):
        d = split_dir if r == 0 else os.path.join(split_dir, f"rotation-{r}")
        if not all(os.path.exists(os.path.join(d, f"{s}.tsv")) for s in ("train", "dev", "test")):
            sys.exit(f"{d}: rotation {r} of brown-genre is missing (tools/datasets/fetch_and_convert.sh writes it)")
        e = entry0 if r == 0 else classification(f"brown-genre rotation {r}", d, mirror)
        n = {s: len(read_tsv(os.path.join(d, f"{s}.tsv"))[0]) for s in ("dev", "test")}
        per.append({"rotation": r, "examples": n,
                    "candidates": {k: {"model": v["model"], "dev_right": round(v["dev"]["accuracy"] * n["dev"]),
                                       "test_right": round(v["test"]["accuracy"] * n["test"])}
                                   for k, v in e["candidates"].items()}})
        if r > 0:
            sha.update({f"rotation-{r}/{s}.tsv": sha256(os.path.join(d, f"{s}.tsv")) for s in ("train", "dev", "test")})
    totals = {s: sum(p["examples"][s] for p in per) for s in ("dev", "test")}
    pooled = {k: {s: round(sum(p["candidates"][k][f"{s}_right"] for p in per) / totals[s], 6) for s in ("dev", "test")}
              for k in per[0]["candidates"]}
    best = max(pooled, key=lambda k: pooled[k]["dev"])
    print(f"brown-genre rotations: pooled {pooled}; best {best}", flush=True)
    return {"rule": "convert.py rotation R: hash bucket (9 + R) % 10 -> test, (8 + R) % 10 -> dev, the rest -> train",
            "examples": totals, "pooled_accuracy": pooled, "best": best, "best_test": pooled[best]["test"],
            "per_rotation": per, "split_sha256": sha}


def shape(token):
    out, last, run = [], None, 0
    for ch in token:
        s = "X" if "A" <= ch <= "Z" else "x" if "a" <= ch <= "z" else "d" if "0" <= ch <= "9" else ch
        run = run + 1 if s == last else 1
        last = s
        if run <= 2:
            out.append(s)
    return "".join(out)


def window(tokens, t, rich):
    folded = [fold(w) for w in tokens]
    def word(i):
        return "<s>" if i < 0 else "</s>" if i >= len(tokens) else folded[i]
    def shp(i):
        return "<s>" if i < 0 else "</s>" if i >= len(tokens) else shape(tokens[i])
    f = {"w-1=" + word(t - 1): 1, "w0=" + word(t): 1, "w+1=" + word(t + 1): 1,
         "s-1=" + shp(t - 1): 1, "s0=" + shp(t): 1, "s+1=" + shp(t + 1): 1}
    if rich:
        w = folded[t]
        for k in (1, 2, 3):
            f[f"pre{k}=" + w[:k]] = 1
            f[f"suf{k}=" + w[-k:]] = 1
        f["cap=" + str(tokens[t][:1].isupper())] = 1
        f["digit=" + str(any(ch.isdigit() for ch in tokens[t]))] = 1
    return f


def spans(tags):
    """CoNLL-2000 chunk reading of BIO: set of (type, start, end)."""
    out, start, kind = set(), None, None
    for i, tag in enumerate(list(tags) + ["O"]):
        prefix, _, typ = tag.partition("-")
        opens = prefix == "B" or (prefix == "I" and (kind is None or typ != kind))
        if kind is not None and (prefix == "O" or opens):
            out.add((kind, start, i - 1))
            kind = None
        if opens:
            start, kind = i, typ
    return out


def tagging_scores(gold_sentences, predicted_sentences):
    gold_n = pred_n = correct = tokens = right = 0
    for gold, pred in zip(gold_sentences, predicted_sentences):
        g, p = spans(gold), spans(pred)
        gold_n += len(g)
        pred_n += len(p)
        correct += len(g & p)
        tokens += len(gold)
        right += sum(a == b for a, b in zip(gold, pred))
    precision = correct / pred_n if pred_n else 0.0
    recall = correct / gold_n if gold_n else 0.0
    f1 = 2 * precision * recall / (precision + recall) if precision + recall else 0.0
    return {"span_f1": round(f1, 6), "token_accuracy": round(right / tokens, 6)}


def tagging(name, split_dir):
    data = {s: read_columns(os.path.join(split_dir, f"{s}.tsv")) for s in ("train", "dev", "test")}
    out = {"candidates": {}}
    for key, rich in (("gyre_mirror", False), ("lr_window_affixes", True)):
        vec = DictVectorizer()
        def rows(split):
            return [window(toks, t, rich) for toks, _ in data[split] for t in range(len(toks))]
        x = {"train": vec.fit_transform(rows("train"))}
        x.update({s: vec.transform(rows(s)) for s in ("dev", "test")})
        y = {s: [tag for _, tags in data[s] for tag in tags] for s in data}
        lengths = {s: [len(toks) for toks, _ in data[s]] for s in data}

        def scorer(model, xs, ys, _lengths=lengths, _data=data):
            split = next(s for s in ("train", "dev", "test") if xs is x[s])
            flat = list(model.predict(xs))
            pred, i = [], 0
            for n in _lengths[split]:
                pred.append(flat[i:i + n])
                i += n
            return tagging_scores([tags for _, tags in _data[split]], pred)
        c, dev, test = grid(lambda: x, y, "span_f1", scorer)
        entry = {"c": c, "dev": dev, "test": test}
        if key == "gyre_mirror":
            out["gyre_mirror"] = entry
            out["candidates"]["lr_window"] = dict(entry, model=f"LogisticRegression(C={c}) on one-hot w-1/w0/w+1 "
                                                                "+ s-1/s0/s+1 (the gyre mirror)")
        else:
            out["candidates"][key] = dict(entry, model=f"LogisticRegression(C={c}) on the window features + "
                                                       "prefixes/suffixes 1-3 + capitalised/digit flags")
        print(f"{name}: {key} C={c} dev {dev} test {test}", flush=True)
    return out


def main():
    if len(sys.argv) not in (2, 3):
        sys.exit(__doc__)
    data_dir = sys.argv[1]
    source_dir = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))
    out_json = sys.argv[2] if len(sys.argv) == 3 else os.path.join(source_dir, "tests", "fixtures", "datasets",
                                                                   "baselines.json")
    which = [d for d in ("names", "brown-genre", "brown-names", "spam")
             if os.path.isdir(os.path.join(data_dir, d))]
    results = {}
    if os.path.exists(out_json):
        with open(out_json, encoding="utf-8") as f:
            results = json.load(f)["datasets"]
    for name in which:
        split_dir = os.path.join(data_dir, name)
        if name == "brown-names":
            entry = tagging(name, split_dir)
            metric = "span_f1"
        else:
            mirror = {"names": lambda t: list(fold(t)), "brown-genre": lambda t: fold(t).split()}.get(name)
            entry = classification(name, split_dir, mirror, {"names": 4}.get(name, 2))
            metric = "accuracy"
        best = max(entry["candidates"], key=lambda k: entry["candidates"][k]["dev"][metric])
        if name == "brown-genre":
            entry["rotations"] = rotations(split_dir, entry, mirror)
        entry["metric"] = metric
        entry["best"] = best
        entry["best_test"] = entry["candidates"][best]["test"][metric]
        entry["split_sha256"] = {f"{s}.tsv": sha256(os.path.join(split_dir, f"{s}.tsv"))
                                 for s in ("train", "dev", "test")}
        print(f"{name}: best {best}: test {metric} {entry['best_test']}", flush=True)
        results[name] = entry
    fixture = {"made_by": "/usr/bin/python3 tools/datasets/baselines.py DATA_DIR "
                          "(splits from tools/datasets/fetch_and_convert.sh)",
               "sklearn_version": sklearn.__version__, "python_version": platform.python_version(),
               "datasets": results}
    os.makedirs(os.path.dirname(os.path.abspath(out_json)), exist_ok=True)
    tmp = f"{out_json}.tmp-{os.getpid()}"
    with open(tmp, "w", encoding="utf-8") as f:
        json.dump(fixture, f, indent=2)
        f.write("\n")
    os.replace(tmp, out_json)
    print(f"wrote {out_json}")


if __name__ == "__main__":
    main()
