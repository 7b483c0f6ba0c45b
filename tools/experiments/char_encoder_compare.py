#!/usr/bin/env python3
"""Character CNN vs character BiLSTM as the word-level character encoder of a BiLSTM tagger,
measured in python3-torch (a reference library outside gyre) on one tagging dataset of
tools/datasets (issue 12 item 1: "measure both ... and keep what wins").

Both encoders read each token's characters as written (un-folded); the word embedding reads the
case-folded token; their outputs are joined and fed to the same BiLSTM tagger. Only the encoder
differs between the two arms:
  cnn     character embedding 30 -> convolution, 30 filters of width 3 (padding 1) -> max over
          positions (Ma & Hovy 2016, section 2.1; sizes as their Table 1)
  bilstm  character embedding 30 -> BiLSTM, 15 units per direction -> the final forward state
          joined with the final backward state (Lample et al. 2016, section 4.1; 15 per direction
          so both arms give 30 features - our choice, Lample et al. used 25)
Everything else follows gyre's tagger defaults (README option table): word embedding 64,
BiLSTM hidden 128 per direction, dropout 0.2, Adam lr 0.002, global gradient norm clipped to 5,
batch 32, up to 10 epochs with
patience 3 on dev span F1, softmax output. Span F1: exact-match micro F1 over BIO spans
(the CoNLL-2000 shared-task definition). Character list: clusters seen at least twice in the
training split (approximated by code points here), others -> <unk>; tokens cut at 32 characters
as gyre does.

usage: char_encoder_compare.py DATA_DIR [--seeds 1 2 3] [--json OUT]
  DATA_DIR holds train.tsv / dev.tsv / test.tsv in gyre's columns format (token<TAB>tag per line,
  blank line between sentences), e.g. tools/datasets/fetch_and_convert.sh's brown-names.
"""
import argparse
import json
import time

import torch
import torch.nn as nn

MAX_CHARS = 32


def read_columns(path):
    sentences, tokens, tags = [], [], []
    with open(path, encoding="utf-8") as f:
        for line in f:
            line = line.rstrip("\n")
            if not line:
                if tokens:
                    sentences.append((tokens, tags))
                tokens, tags = [], []
                continue
            token, tag = line.split("\t")
            tokens.append(token)
            tags.append(tag)
    if tokens:
        sentences.append((tokens, tags))
    return sentences


def spans(tags):
    out, start, kind = set(), None, None
    for i, tag in enumerate(tags + ["O"]):
        if start is not None and not (tag.startswith("I-") and tag[2:] == kind):
            out.add((start, i, kind))
            start = None
        if tag.startswith("B-") or (tag.startswith("I-") and start is None):
            start, kind = i, tag[2:]
    return out


def span_f1(gold, predicted):
    tp = fp = fn = 0
    for g, p in zip(gold, predicted):
        gs, ps = spans(g), spans(p)
        tp += len(gs & ps)
        fp += len(ps - gs)
        fn += len(gs - ps)
    precision = tp / (tp + fp) if tp + fp else 0.0
    recall = tp / (tp + fn) if tp + fn else 0.0
    return 2 * precision * recall / (precision + recall) if precision + recall else 0.0


class Tagger(nn.Module):
    def __init__(self, words, chars, tags, encoder):
        super().__init__()
        self.encoder = encoder
        self.word = nn.Embedding(words, 64, padding_idx=0)
        self.char = nn.Embedding(chars, 30, padding_idx=0)
        if encoder == "cnn":
            self.conv = nn.Conv1d(30, 30, 3, padding=1)
        else:
            self.char_rnn = nn.LSTM(30, 15, batch_first=True, bidirectional=True)
        self.rnn = nn.LSTM(64 + 30, 128, batch_first=True, bidirectional=True)
        self.drop = nn.Dropout(0.2)
        self.out = nn.Linear(256, tags)

    def char_features(self, chars, char_lengths):
        # chars: [N x L] ids of N tokens; char_lengths: [N] (>= 1)
        e = self.char(chars)
        if self.encoder == "cnn":
            h = self.conv(e.transpose(1, 2))  # [N x 30 x L]
            mask = (torch.arange(chars.shape[1])[None, :] < char_lengths[:, None])[:, None, :]
            return h.masked_fill(~mask, float("-inf")).max(dim=2).values
        packed = nn.utils.rnn.pack_padded_sequence(e, char_lengths, batch_first=True, enforce_sorted=False)
        _, (h, _) = self.char_rnn(packed)
        return torch.cat([h[0], h[1]], dim=1)

    def forward(self, words, chars, char_lengths, lengths):
        b, t = words.shape
        valid = (torch.arange(t)[None, :] < lengths[:, None]).reshape(-1)
        feats = torch.zeros(b * t, 30)
        feats[valid] = self.char_features(chars.reshape(b * t, -1)[valid], char_lengths.reshape(-1)[valid])
        x = torch.cat([self.word(words), feats.reshape(b, t, 30)], dim=2)
        packed = nn.utils.rnn.pack_padded_sequence(x, lengths, batch_first=True, enforce_sorted=False)
        h, _ = self.rnn(packed)
        h, _ = nn.utils.rnn.pad_packed_sequence(h, batch_first=True, total_length=t)
        return self.out(self.drop(h))


def encode(batch, word_ids, char_ids, tag_ids):
    t = max(len(tokens) for tokens, _ in batch)
    words = torch.zeros(len(batch), t, dtype=torch.long)
    chars = torch.zeros(len(batch), t, MAX_CHARS, dtype=torch.long)
    char_lengths = torch.ones(len(batch), t, dtype=torch.long)
    tags = torch.full((len(batch), t), -100, dtype=torch.long)
    for i, (tokens, tag_list) in enumerate(batch):
        for j, token in enumerate(tokens):
            words[i, j] = word_ids.get(token.lower(), 1)
            cs = list(token)[:MAX_CHARS] or [" "]
            char_lengths[i, j] = len(cs)
            for k, c in enumerate(cs):
                chars[i, j, k] = char_ids.get(c, 1)
            tags[i, j] = tag_ids[tag_list[j]]
    lengths = torch.tensor([len(tokens) for tokens, _ in batch])
    return words, chars, char_lengths, lengths, tags


def predict(model, data, vocab):
    model.eval()
    word_ids, char_ids, tag_ids, tag_names = vocab
    out = []
    with torch.no_grad():
        for i in range(0, len(data), 64):
            batch = data[i:i + 64]
            words, chars, char_lengths, lengths, _ = encode(batch, word_ids, char_ids, tag_ids)
            best = model(words, chars, char_lengths, lengths).argmax(dim=2)
            for j, (tokens, _) in enumerate(batch):
                out.append([tag_names[k] for k in best[j, :len(tokens)].tolist()])
    return out


def run(encoder, seed, train, dev, test, vocab):
    torch.manual_seed(seed)
    word_ids, char_ids, tag_ids, tag_names = vocab
    model = Tagger(len(word_ids) + 2, len(char_ids) + 2, len(tag_names), encoder)
    opt = torch.optim.Adam(model.parameters(), lr=0.002)
    loss_fn = nn.CrossEntropyLoss(ignore_index=-100)
    g = torch.Generator().manual_seed(seed)
    best_dev, best_state, bad, seconds = -1.0, None, 0, 0.0
    for epoch in range(10):
        model.train()
        start = time.perf_counter()
        order = torch.randperm(len(train), generator=g).tolist()
        for i in range(0, len(order), 32):
            batch = [train[k] for k in order[i:i + 32]]
            words, chars, char_lengths, lengths, tags = encode(batch, word_ids, char_ids, tag_ids)
            opt.zero_grad()
            logits = model(words, chars, char_lengths, lengths)
            loss = loss_fn(logits.reshape(-1, logits.shape[-1]), tags.reshape(-1))
            loss.backward()
            nn.utils.clip_grad_norm_(model.parameters(), 5.0)
            opt.step()
        seconds += time.perf_counter() - start
        dev_f1 = span_f1([t for _, t in dev], predict(model, dev, vocab))
        print(f"  {encoder} seed {seed} epoch {epoch + 1}: dev span F1 {dev_f1:.4f}", flush=True)
        if dev_f1 > best_dev:
            best_dev, bad = dev_f1, 0
            best_state = {k: v.clone() for k, v in model.state_dict().items()}
        else:
            bad += 1
            if bad >= 3:
                break
    model.load_state_dict(best_state)
    test_f1 = span_f1([t for _, t in test], predict(model, test, vocab))
    return {"dev": best_dev, "test": test_f1, "train_seconds": seconds, "epochs": epoch + 1}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("data")
    ap.add_argument("--seeds", type=int, nargs="+", default=[1, 2, 3])
    ap.add_argument("--json")
    args = ap.parse_args()
    torch.set_num_threads(1)
    train, dev, test = (read_columns(f"{args.data}/{s}.tsv") for s in ("train", "dev", "test"))
    words, counts = {}, {}
    for tokens, _ in train:
        for token in tokens:
            words.setdefault(token.lower(), len(words) + 2)
            for c in token[:MAX_CHARS]:
                counts[c] = counts.get(c, 0) + 1
    chars = {c: i + 2 for i, c in enumerate(sorted(c for c, n in counts.items() if n >= 2))}
    tag_names = sorted({tag for _, tags in train for tag in tags})
    vocab = (words, chars, {t: i for i, t in enumerate(tag_names)}, tag_names)
    results = {}
    for encoder in ("cnn", "bilstm"):
        results[encoder] = [dict(seed=seed, **run(encoder, seed, train, dev, test, vocab)) for seed in args.seeds]
        tests = [r["test"] for r in results[encoder]]
        mean = sum(tests) / len(tests)
        sd = (sum((x - mean) ** 2 for x in tests) / (len(tests) - 1)) ** 0.5 if len(tests) > 1 else 0.0
        secs = sum(r["train_seconds"] for r in results[encoder]) / sum(r["epochs"] for r in results[encoder])
        print(f"{encoder}: test span F1 {mean:.4f} +- {sd:.4f} over seeds {args.seeds}; {secs:.1f} s per epoch",
              flush=True)
    if args.json:
        with open(args.json, "w") as f:
            json.dump({"torch": torch.__version__, "results": results}, f, indent=1)


if __name__ == "__main__":
    main()
