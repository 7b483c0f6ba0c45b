#!/usr/bin/python3
"""Makes the invented Kettle & Coil demo corpora in corpora/demo/ (deterministic).

Usage: /usr/bin/python3 tools/demo_corpora/gen_demo_corpora.py [OUT_DIR]
       (default OUT_DIR: corpora/demo of this source tree)

Everything is invented: an appliance-repair service, "Kettle & Coil", in the invented town of
Marrowby. The text comes from hand-written banks beside this script:
  intents.txt    message templates per intent class + class-neutral greetings/sign-offs/context
  sentiment.txt  review openings, details, closings and whole reviews per sentiment class
  slots.txt      booking-message templates with typed slot placeholders
  fillers.txt    names, staff, appliances, parts, model codes, streets, dates, times, prices
The generator (random.Random(SEED), no other randomness) fills placeholders, joins pieces, adds
surface noise (typos, case changes, dropped punctuation, emoji), removes exact duplicates
across all splits, splits per class, and flips a fixed share of labels (label noise) in every
split. Slot sentences are cut into tokens by ICU word boundaries (UAX #29) through Node's
Intl.Segmenter, the same segmentation gyre's `words` tokenizer uses; whitespace is dropped.
Run twice -> byte-identical files.
"""

import collections
import json
import os
import random
import re
import subprocess
import sys

SEED = 20261201
HERE = os.path.dirname(os.path.abspath(__file__))
SOURCE_DIR = os.path.dirname(os.path.dirname(HERE))

# Examples per class before the split, and the dev/test share of each class (train gets the
# rest); the counts are chosen so that the shares come out whole.
INTENT_COUNTS = collections.OrderedDict([
    ("book_repair", 520), ("reschedule", 400), ("cancel", 320), ("order_part", 424),
    ("warranty", 360), ("billing", 400), ("complaint", 440), ("praise", 336),
])  # 3200 -> 2400 / 400 / 400
INTENT_HELD_OUT_SHARE = 1 / 8
SENTIMENT_COUNTS = collections.OrderedDict([
    ("positive", 882), ("neutral", 560), ("negative", 658),
])  # 2100 -> 1500 / 300 / 300
SENTIMENT_HELD_OUT_SHARE = 1 / 7
SLOT_SENTENCES = 2100  # -> 1500 / 300 / 300
SLOT_SPLIT = (("train", 1500), ("dev", 300), ("test", 300))
LABEL_NOISE = 0.025  # share of examples per split whose label is deliberately wrong

# Label noise goes mostly to classes a tired annotator would confuse.
INTENT_CONFUSIONS = {
    "book_repair": ["reschedule", "order_part", "complaint"],
    "reschedule": ["book_repair", "cancel"],
    "cancel": ["reschedule", "complaint"],
    "order_part": ["book_repair", "warranty", "billing"],
    "warranty": ["complaint", "billing", "book_repair"],
    "billing": ["complaint", "warranty"],
    "complaint": ["billing", "warranty", "cancel"],
    "praise": ["complaint", "book_repair"],
}
SENTIMENT_CONFUSIONS = {
    "positive": ["neutral", "neutral", "neutral", "negative"],
    "neutral": ["positive", "negative"],
    "negative": ["neutral", "neutral", "neutral", "positive"],
}
SLOT_TYPES = ["appliance", "part", "model_code", "date", "time", "street"]
TAGGED = {"appliance": "appliance", "part": "part", "model": "model_code", "date": "date",
          "reldate": "date", "time": "time", "daypart": "time", "street": "street",
          "address": "street"}
NEUTRAL_EMOJI = ["🙏", "😅", "🙂", "👍", "😩", "🤞", "📅", "🔧", "☕", "😬"]


# ------------------------------------------------------------------ banks
def read_bank(name):
    """Returns {section: [lines]} from a bank file ('[section]' headers, '#' comments)."""
    sections = collections.OrderedDict()
    current = None
    path = os.path.join(HERE, name)
    with open(path, encoding="utf-8") as f:
        for number, raw in enumerate(f, start=1):
            line = raw.rstrip("\n").strip()
            if not line or line.startswith("#"):
                continue
            m = re.fullmatch(r"\[([a-z_]+)\]", line)
            if m:
                current = m.group(1)
                sections.setdefault(current, [])
                continue
            if current is None:
                sys.exit(f"{path}:{number}: text before the first [section]")
            if "\t" in line:
                sys.exit(f"{path}:{number}: TAB in a bank line")
            sections[current].append(line)
    return sections


def read_fillers():
    """fillers.txt; "[appliance]" and "[part]" entries are (value, {categories})."""
    fill = {}
    for section, lines in read_bank("fillers.txt").items():
        if section in ("appliance", "part"):
            entries = []
            for line in lines:
                value, _, cats = line.partition(" | ")
                if not cats:
                    sys.exit(f"fillers.txt: [{section}] entry without categories: {line!r}")
                entries.append((value, frozenset(cats.split())))
            fill[section] = entries
        else:
            fill[section] = lines
    return fill


FILL = read_fillers()
PLACEHOLDER = re.compile(r"\{([a-z]+)\}")
# Keys whose value stays the same through one message (same customer, same appliance ...).
STICKY = ("appliance", "street", "name", "tech")


def make_model_code(rng):
    """An invented model code: letters, optional separator, digits, optional suffix."""
    letters = "ABCDEFGHKLMNPQRSTVWXZ"
    prefix = "".join(rng.choice(letters) for _ in range(rng.choice([1, 2, 2, 2, 3])))
    sep = rng.choice(["-", "-", "-", " ", ""])
    digits = str(rng.randint(1, 9)) + "".join(str(rng.randint(0, 9))
                                               for _ in range(rng.choice([1, 2, 2, 3])))
    suffix = rng.choice(["", "", "", "X", "S", "E", "b", "i", "C", "/2"])
    code = prefix + sep + digits + suffix
    return code.lower() if rng.random() < 0.08 else code


class Filler:
    """Fills the placeholders of one message. Sticky keys keep their first value through the
    message (a second use of the key inside one template gets a different value); a part is
    chosen to fit the message's appliance and vice versa."""

    def __init__(self, rng, sticky=True):
        self.rng = rng
        self.sticky = sticky
        self.cache = {}
        self.cats = None  # categories of the appliance (or part) named first

    def value(self, key, fresh=False):
        rng = self.rng
        if self.sticky and key in STICKY and key in self.cache and not fresh:
            return self.cache[key]
        if key == "address":
            street = self.value("street", fresh)
            return f"{rng.choice(FILL['housenum'])} {street}"
        if key == "model" and rng.random() < 0.5:
            return make_model_code(rng)
        if key not in FILL:
            raise KeyError(f"unknown placeholder {{{key}}}")
        if key in ("appliance", "part"):
            entries = FILL[key]
            if self.cats is not None:
                fitting = [e for e in entries if e[1] & self.cats]
                entries = fitting or entries
            value, cats = rng.choice(entries)
            if self.cats is None:
                self.cats = cats
        else:
            value = rng.choice(FILL[key])
            if fresh and key in self.cache and value == self.cache[key]:
                value = rng.choice(FILL[key])  # one more draw: "X and the X" stays rare
        if key in STICKY:
            self.cache.setdefault(key, value)
        return value

    def fill(self, template, spans=None):
        """Returns the filled text; with spans=[] also records (start, end, key) per value."""
        used = collections.Counter()
        text, pos = "", 0
        for m in PLACEHOLDER.finditer(template):
            text += template[pos:m.start()]
            key = m.group(1)
            used[key] += 1
            value = self.value(key, fresh=used[key] > 1)
            if spans is not None:
                spans.append((len(text), len(text) + len(value), key))
            text += value
            pos = m.end()
        return text + template[pos:]


# ------------------------------------------------------------------ surface noise
KEYBOARD = {c: n for c, n in zip("qwertyuiopasdfghjklzxcvbnm", "wqrtyuiopoadfghjklkzxcvbnm")}


def typo(rng, word):
    """One keyboard slip inside a word of letters (kept a single word token)."""
    if len(word) < 4 or not word.isalpha():
        return word
    i = rng.randrange(1, len(word) - 1)
    op = rng.randrange(4)
    if op == 0:  # swap two neighbours
        return word[:i] + word[i + 1] + word[i] + word[i + 2:]
    if op == 1:  # drop a letter
        return word[:i] + word[i + 1:]
    if op == 2:  # double a letter
        return word[:i] + word[i] + word[i:]
    low = word[i].lower()
    return word[:i] + KEYBOARD.get(low, low) + word[i + 1:]  # neighbouring key


def add_typos(rng, text, rate):
    return re.sub(r"[A-Za-z]+", lambda m: typo(rng, m.group(0)) if rng.random() < rate
                  else m.group(0), text)


def surface(rng, text):
    """Typos, case and punctuation changes, emoji -- the things real messages have."""
    text = add_typos(rng, text, 0.025)
    r = rng.random()
    if r < 0.12:
        text = text.lower()
    elif r < 0.14:
        text = text.upper()
    elif r < 0.19 and text[:1].isupper():
        text = text[0].lower() + text[1:]
    if rng.random() < 0.25 and text.endswith("."):
        text = text[:-1]
    if rng.random() < 0.06 and (text.endswith(".") or text[-1:].isalnum()):
        text = text.rstrip(".") + rng.choice(["!!", "!!!", "??", "...", " ?"])
    if rng.random() < 0.06:
        text = text + " " + rng.choice(NEUTRAL_EMOJI)
    return re.sub(r"\s+", " ", text).strip()


# ------------------------------------------------------------------ intents
def intent_message(rng, bank, label):
    fill = Filler(rng).fill
    core = fill(rng.choice(bank[label]))
    parts = []
    long_message = rng.random() < 0.06  # a rambling message: several extra sentences
    greets = re.match(r"(hi|hello|hey|hiya|good (morning|afternoon|evening))\b", core, re.I)
    if (rng.random() < 0.30 or long_message) and not greets:
        parts.append(fill(rng.choice(bank["_greeting"])))
    if rng.random() < 0.08:
        parts.append(fill(rng.choice(bank["_context"])))
    if long_message:
        parts.extend(fill(c) for c in rng.sample(bank["_context"], 2))
    parts.append(core)
    if rng.random() < 0.10 or long_message:  # a second sentence of the same intent
        parts.append(fill(rng.choice(bank[label])))
    if rng.random() < 0.04:  # ambiguity: a side remark that belongs to another intent
        other = rng.choice([c for c in INTENT_COUNTS if c != label])
        parts.append(fill(rng.choice(bank[other])))
    if rng.random() < 0.18:
        parts.append(fill(rng.choice(bank["_context"])))
    if rng.random() < 0.25 or long_message:
        parts.append(fill(rng.choice(bank["_signoff"])))
    if len(core.split()) <= 3 and rng.random() < 0.7:
        parts = [core]  # short messages stay short
    joiner = rng.choice([" ", " ", " ", "\u00a0", "  "])
    return surface(rng, joiner.join(parts))


# ------------------------------------------------------------------ sentiment
def review(rng, bank, label):
    fill = Filler(rng).fill
    r = rng.random()
    if r < 0.15:
        return surface(rng, fill(rng.choice(bank[f"{label}_full"])))
    if r < 0.20:
        return surface(rng, fill(rng.choice(bank[f"mixed_{label}"])))
    parts = []
    if rng.random() < 0.9:
        parts.append(rng.choice(bank[f"{label}_open"]))
    n_details = rng.choice([0, 1, 1, 2, 2, 3]) if rng.random() > 0.05 else rng.choice([4, 5, 6])
    details = rng.sample(bank[f"{label}_detail"], n_details)
    if label != "neutral" and details and rng.random() < 0.2:
        details.insert(rng.randrange(len(details) + 1), rng.choice(bank["neutral_detail"]))
    parts.extend(details)
    if rng.random() < 0.6 or not parts:
        parts.append(rng.choice(bank[f"{label}_close"]))
    return surface(rng, fill(" ".join(parts)))


# ------------------------------------------------------------------ shared split + noise
def split_and_noise(rng, examples, labels, held_out_share, confusions):
    """examples: {label: [text]} -> {split: [(label, text, noisy)]}; dev and test each get
    held_out_share of every class, train the rest."""
    splits = {"train": [], "dev": [], "test": []}
    for label in labels:
        texts = examples[label]
        n = len(texts)
        n_dev = round(n * held_out_share)
        n_test = n_dev
        n_train = n - n_dev - n_test
        cut = {"train": texts[:n_train], "dev": texts[n_train:n_train + n_dev],
               "test": texts[n_train + n_dev:]}
        for name in cut:
            splits[name].extend((label, t, False) for t in cut[name])
    for name in splits:
        rows = splits[name]
        rng.shuffle(rows)
        for i in rng.sample(range(len(rows)), round(len(rows) * LABEL_NOISE)):
            label, text, _ = rows[i]
            rows[i] = (rng.choice(confusions[label]), text, True)
    return splits


def write_atomic(path, text):
    tmp = f"{path}.tmp-{os.getpid()}"
    with open(tmp, "w", encoding="utf-8", newline="\n") as f:
        f.write(text)
    os.replace(tmp, path)


def write_classification(out_dir, stem, splits):
    stats = {}
    for name, rows in splits.items():
        lines = ["label\ttext"] + [f"{label}\t{text}" for label, text, _ in rows]
        write_atomic(os.path.join(out_dir, f"{stem}.{name}.tsv"), "\n".join(lines) + "\n")
        stats[name] = {"rows": len(rows),
                       "per_label": dict(sorted(collections.Counter(r[0] for r in rows).items())),
                       "noisy_labels": sum(1 for r in rows if r[2])}
    return stats


def unique_texts(rng, make, labels, counts, seen, max_tries=200000):
    out = {}
    for label in labels:
        texts = []
        tries = 0
        while len(texts) < counts[label]:
            tries += 1
            if tries > max_tries:
                sys.exit(f"cannot make {counts[label]} distinct texts for {label}")
            text = make(label)
            key = text.casefold()
            if key in seen or "\t" in text or "\n" in text:
                continue
            seen.add(key)
            texts.append(text)
        out[label] = texts
    return out


# ------------------------------------------------------------------ slots
NODE_SEGMENT = r"""
const seg = new Intl.Segmenter('en', {granularity: 'word'});
let input = '';
process.stdin.on('data', (d) => { input += d; });
process.stdin.on('end', () => {
  const out = JSON.parse(input).map((s) => [...seg.segment(s)]
      .filter((x) => !/^\s+$/u.test(x.segment))
      .map((x) => [x.index, x.segment]));
  process.stdout.write(JSON.stringify(out));
});
"""


def segment_all(texts):
    """UAX #29 word segments (ICU via Node's Intl.Segmenter), whitespace segments dropped.
    Indices are UTF-16 offsets; converted to Python string offsets here."""
    try:
        result = subprocess.run(["node", "-e", NODE_SEGMENT], input=json.dumps(texts),
                                capture_output=True, text=True, check=True)
    except FileNotFoundError:
        sys.exit("gen_demo_corpora.py: node not found (Debian package nodejs); it segments words")
    except subprocess.CalledProcessError as e:
        sys.exit(f"gen_demo_corpora.py: node failed: {e.stderr.strip()}")
    out = []
    for text, segs in zip(texts, json.loads(result.stdout)):
        # UTF-16 offset -> code point offset
        u16_to_cp = {}
        u16 = 0
        for cp, ch in enumerate(text):
            u16_to_cp[u16] = cp
            u16 += 2 if ord(ch) > 0xFFFF else 1
        u16_to_cp[u16] = len(text)
        out.append([(u16_to_cp[i], u16_to_cp[i] + len(seg_text), seg_text) for i, seg_text in segs])
    return out


def slot_sentence(rng, templates):
    """Returns (text, spans) with spans [(start, end, type)] in code points."""
    spans = []
    text = Filler(rng).fill(rng.choice(templates), spans)
    return text, [(s, e, TAGGED[key]) for s, e, key in spans if key in TAGGED]


def tag_tokens(text, spans, segments):
    """BIO tags from character spans; a token may not cross a span edge."""
    tokens, tags = [], []
    previous_span = None
    for start, end, seg_text in segments:
        assert text[start:end] == seg_text, (text, start, end, seg_text)
        tag, span_index = "O", None
        for k, (s, e, kind) in enumerate(spans):
            if s <= start < e:
                if end > e:
                    raise ValueError(f"token {seg_text!r} crosses the end of a {kind} span: {text!r}")
                tag = ("I-" if previous_span == k else "B-") + kind
                span_index = k
            elif start < s < end:
                raise ValueError(f"token {seg_text!r} crosses the start of a {kind} span: {text!r}")
        previous_span = span_index
        tokens.append(seg_text)
        tags.append(tag)
    return tokens, tags


def slot_surface(rng, tokens):
    out = [typo(rng, t) if rng.random() < 0.025 else t for t in tokens]
    r = rng.random()
    if r < 0.12:
        out = [t.lower() for t in out]
    elif r < 0.135:
        out = [t.upper() for t in out]
    return out


def corrupt_tags(rng, tags):
    """One deliberate annotation error in a sentence with at least one entity."""
    tags = list(tags)
    starts = [i for i, t in enumerate(tags) if t.startswith("B-")]
    i = rng.choice(starts)
    j = i + 1
    while j < len(tags) and tags[j] == "I-" + tags[i][2:]:
        j += 1
    kind = tags[i][2:]
    r = rng.random()
    if r < 0.4:  # entity missed
        for k in range(i, j):
            tags[k] = "O"
    elif r < 0.8:  # wrong type
        other = rng.choice([t for t in SLOT_TYPES if t != kind])
        for k in range(i, j):
            tags[k] = ("B-" if k == i else "I-") + other
    elif j - i > 1:  # span too short: last token left out
        tags[j - 1] = "O"
    elif j < len(tags) and tags[j] == "O":  # span too long: next token taken in
        tags[j] = "I-" + kind
    else:
        for k in range(i, j):
            tags[k] = "O"
    return tags


def make_slots(rng, out_dir):
    templates = read_bank("slots.txt")["slots"]
    raw, seen = [], set()
    tries = 0
    while len(raw) < SLOT_SENTENCES * 3 and tries < 100000:  # over-generate, dedupe later
        tries += 1
        raw.append(slot_sentence(rng, templates))
    segments = segment_all([t for t, _ in raw])
    sentences = []
    for (text, spans), segs in zip(raw, segments):
        tokens, tags = tag_tokens(text, spans, segs)
        tokens = slot_surface(rng, tokens)
        key = "\x1f".join(tokens).casefold()
        if key in seen:
            continue
        seen.add(key)
        sentences.append((tokens, tags))
        if len(sentences) == SLOT_SENTENCES:
            break
    if len(sentences) < SLOT_SENTENCES:
        sys.exit(f"only {len(sentences)} distinct slot sentences")
    rng.shuffle(sentences)
    stats, pos = {}, 0
    for name, n in SLOT_SPLIT:
        part = sentences[pos:pos + n]
        pos += n
        with_entities = [i for i, (_, tags) in enumerate(part) if any(t != "O" for t in tags)]
        noisy = set(rng.sample(with_entities, round(n * LABEL_NOISE * 0.8)))
        lines, entity_counts, tokens_total = [], collections.Counter(), 0
        for i, (tokens, tags) in enumerate(part):
            if i in noisy:
                tags = corrupt_tags(rng, tags)
            for token, tag in zip(tokens, tags):
                assert token and "\t" not in token and " " not in token, token
                lines.append(f"{token}\t{tag}")
                if tag.startswith("B-"):
                    entity_counts[tag[2:]] += 1
            tokens_total += len(tokens)
            lines.append("")
        write_atomic(os.path.join(out_dir, f"slots.{name}.tsv"), "\n".join(lines))
        stats[name] = {"sentences": n, "tokens": tokens_total,
                       "entities": dict(sorted(entity_counts.items())),
                       "sentences_without_entities": n - len(with_entities),
                       "noisy_sentences": len(noisy)}
    return stats


# ------------------------------------------------------------------ main
def generate(out_dir):
    rng = random.Random(SEED)
    os.makedirs(out_dir, exist_ok=True)
    intents_bank = read_bank("intents.txt")
    sentiment_bank = read_bank("sentiment.txt")
    stats = {"seed": SEED, "label_noise_share": LABEL_NOISE}

    seen = set()
    texts = unique_texts(rng, lambda label: intent_message(rng, intents_bank, label),
                         list(INTENT_COUNTS), INTENT_COUNTS, seen)
    splits = split_and_noise(rng, texts, list(INTENT_COUNTS), INTENT_HELD_OUT_SHARE,
                             INTENT_CONFUSIONS)
    stats["intents"] = write_classification(out_dir, "intents", splits)

    seen = set()
    texts = unique_texts(rng, lambda label: review(rng, sentiment_bank, label),
                         list(SENTIMENT_COUNTS), SENTIMENT_COUNTS, seen)
    splits = split_and_noise(rng, texts, list(SENTIMENT_COUNTS), SENTIMENT_HELD_OUT_SHARE,
                             SENTIMENT_CONFUSIONS)
    stats["sentiment"] = write_classification(out_dir, "sentiment", splits)

    stats["slots"] = make_slots(rng, out_dir)
    return stats


def main():
    args = sys.argv[1:]
    out_dir = args[0] if args else os.path.join(SOURCE_DIR, "corpora", "demo")
    stats = generate(out_dir)
    print(json.dumps(stats, indent=1, ensure_ascii=False))


if __name__ == "__main__":
    main()
