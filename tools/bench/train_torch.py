#!/usr/bin/python3
"""Reference side of the end-to-end training benchmark (tools/bench/run_train_bench.sh).

Trains, in Debian's python3-torch, the model `gyre train` builds for the benchmark: embedding
(padding row 0) -> 1-layer unidirectional LSTM over packed sequences -> mean pooling over the
valid steps -> linear -> mean cross-entropy; Adam on the dense parameters and its lazy form
(SparseAdam) on the embedding's sparse row gradient, which is what gyre's Adam does for the
embedding (only rows that received gradient are updated); no dropout, no clipping, the same
learning rate. Reads the same TSV files. Tokenization (whitespace split: the corpus is
lowercase ASCII words) and vocabulary building happen before the clock starts; the timed loop
covers batching (length-bucketed, as gyre), forward, backward and the optimizer steps. The dev
set is evaluated after the epoch, outside the timed loop (as gyre). Prints one JSON object.

  /usr/bin/python3 tools/bench/train_torch.py --train T.tsv --dev D.tsv --threads 1
"""

import argparse
import json
import random
import resource
import sys
import time

from torch_ref import blas_info, limit_threads


def read_tsv(path):
    out = []
    with open(path, encoding="utf-8") as f:
        next(f)  # header
        for line in f:
            label, text = line.rstrip("\n").split("\t", 1)
            out.append((label, text.split()))
    return out


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--train", required=True)
    ap.add_argument("--dev", required=True)
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--embedding-size", type=int, default=128)
    ap.add_argument("--hidden-size", type=int, default=256)
    ap.add_argument("--batch-size", type=int, default=32)
    ap.add_argument("--learning-rate", type=float, default=2e-3)
    ap.add_argument("--epochs", type=int, default=1)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--variant", default="default", help="label copied into the output (run settings)")
    ap.add_argument("--info", action="store_true", help="print the BLAS/threads in use as JSON first")
    args = ap.parse_args()

    import torch
    import torch.nn as nn
    import torch.nn.functional as F
    from torch.nn.utils.rnn import pack_padded_sequence, pad_packed_sequence, pad_sequence

    limiter = limit_threads(torch, args.threads)
    torch.manual_seed(args.seed)
    if args.info:
        print(json.dumps(blas_info(torch)), flush=True)

    # ---- data (not timed): tokens -> ids, labels -> ids
    train, dev = read_tsv(args.train), read_tsv(args.dev)
    counts = {}
    for _, toks in train:
        for t in toks:
            counts[t] = counts.get(t, 0) + 1
    vocab = {t: i + 2 for i, t in enumerate(sorted(counts, key=lambda t: (-counts[t], t)))}  # 0 pad, 1 unk
    labels = {l: i for i, l in enumerate(sorted({l for l, _ in train}))}

    def encode(rows):
        return [(torch.tensor([vocab.get(t, 1) for t in toks], dtype=torch.long), labels[l]) for l, toks in rows]

    train_ids, dev_ids = encode(train), encode(dev)

    class Classifier(nn.Module):
        def __init__(self):
            super().__init__()
            self.emb = nn.Embedding(len(vocab) + 2, args.embedding_size, padding_idx=0, sparse=True)
            self.rnn = nn.LSTM(args.embedding_size, args.hidden_size, num_layers=1)
            self.head = nn.Linear(args.hidden_size, len(labels))

        def forward(self, ids, lengths):
            packed = pack_padded_sequence(self.emb(ids), lengths, enforce_sorted=True)
            out, _ = self.rnn(packed)
            padded, _ = pad_packed_sequence(out)  # [T x B x H], zeros on padding
            pooled = padded.sum(0) / lengths.unsqueeze(1).to(padded.dtype)
            return self.head(pooled)

    model = Classifier()
    dense = [p for n, p in model.named_parameters() if not n.startswith("emb.")]
    opt_dense = torch.optim.Adam(dense, lr=args.learning_rate)
    opt_sparse = torch.optim.SparseAdam(list(model.emb.parameters()), lr=args.learning_rate)

    def make_batch(examples):
        examples = sorted(examples, key=lambda e: -len(e[0]))  # pack_padded_sequence(enforce_sorted)
        ids = pad_sequence([e[0] for e in examples])  # [T x B]
        lengths = torch.tensor([len(e[0]) for e in examples], dtype=torch.long)
        return ids, lengths, torch.tensor([e[1] for e in examples], dtype=torch.long)

    def plan(epoch):
        """Shuffle, sort windows of 50 batches by length, cut into batches, shuffle the batches
        (length bucketing, as gyre's batch planner does to limit padding)."""
        rng = random.Random(args.seed * 1000 + epoch)
        order = list(range(len(train_ids)))
        rng.shuffle(order)
        window = 50 * args.batch_size
        batches = []
        for w in range(0, len(order), window):
            chunk = sorted(order[w:w + window], key=lambda i: len(train_ids[i][0]))
            batches += [chunk[i:i + args.batch_size] for i in range(0, len(chunk), args.batch_size)]
        rng.shuffle(batches)
        return batches

    tokens = 0
    loss_sum = 0.0
    steps = 0
    start, cpu_start = time.perf_counter(), time.process_time()
    model.train()
    for epoch in range(args.epochs):
        for indices in plan(epoch):
            ids, lengths, targets = make_batch([train_ids[i] for i in indices])
            opt_dense.zero_grad(set_to_none=True)
            opt_sparse.zero_grad(set_to_none=True)
            loss = F.cross_entropy(model(ids, lengths), targets)
            loss.backward()
            opt_dense.step()
            opt_sparse.step()
            loss_sum += loss.item()
            tokens += int(lengths.sum())
            steps += 1
    wall = time.perf_counter() - start
    cpu = time.process_time() - cpu_start

    model.eval()
    correct = 0
    dev_start = time.perf_counter()
    with torch.no_grad():
        for i in range(0, len(dev_ids), 64):
            ids, lengths, targets = make_batch(dev_ids[i:i + 64])
            correct += int((model(ids, lengths).argmax(1) == targets).sum())
    dev_seconds = time.perf_counter() - dev_start

    print(json.dumps({"side": "torch", "threads": args.threads, "variant": args.variant, "steps": steps,
                      "tokens": tokens, "seconds": wall, "cpu_seconds": cpu,
                      "tokens_per_s": tokens / wall, "tokens_per_cpu_s": tokens / cpu * args.threads,
                      "train_loss": loss_sum / max(steps, 1), "dev_accuracy": correct / len(dev_ids),
                      "dev_seconds": dev_seconds, "vocabulary": len(vocab) + 2,
                      "maxrss_kb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss}), flush=True)
    if limiter is not None:
        limiter.restore_original_limits()


if __name__ == "__main__":
    sys.exit(main())
