#!/usr/bin/python3
"""Reference side of the recurrent-layer speed benchmark (tools/bench/run_rnn_bench.sh).

Runs the same workloads as bench_rnn (tools/bench/bench_rnn.cpp) in Debian's python3-torch:
embedding -> packed LSTM/GRU -> head -> mean cross-entropy, forward + backward, no optimizer
step (gradients are cleared with zero_grad(set_to_none=True) before each batch). Batches come
from the same splitmix64 stream as the C++ side, so both sides see identical token ids, lengths
and targets. Prints one JSON object per workload on stdout.

Run it with Debian's interpreter: /usr/bin/python3 tools/bench/rnn_torch.py --threads 1
"""

import argparse
import json
import sys
import time

from torch_ref import blas_info, limit_threads

MASK = (1 << 64) - 1


class SplitMix64:
    """splitmix64 (Steele, Lea & Flood 2014); bench_rnn.cpp has the same generator."""

    def __init__(self, seed):
        self.state = seed & MASK

    def next(self):
        self.state = (self.state + 0x9E3779B97F4A7C15) & MASK
        z = self.state
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & MASK
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & MASK
        return z ^ (z >> 31)


# Workload constants shared with bench_rnn.cpp.
VOCAB = 10000
EMBED = 128
BATCH = 32
MIN_LEN, MAX_LEN = 8, 64
CLASSES = 8  # sequence classes (uni-directional workloads)
TAGS = 9     # per-token tags (bidirectional workload)
POOL = 16    # distinct batches, cycled
SEED = 20261201

WORKLOADS = {
    "lstm-64": ("lstm", 64, False),
    "lstm-256": ("lstm", 256, False),
    "lstm-512": ("lstm", 512, False),
    "gru-64": ("gru", 64, False),
    "gru-256": ("gru", 256, False),
    "gru-512": ("gru", 512, False),
    "bilstm-128-tagger": ("lstm", 128, True),
}


def make_batches():
    """Batches as lists: lengths sorted descending, ids[t][b] (0 = padding), labels[b], tags[t][b]
    (-1 on padding). Same draw order as bench_rnn.cpp."""
    rng = SplitMix64(SEED)
    batches = []
    for _ in range(POOL):
        lengths = [MIN_LEN + rng.next() % (MAX_LEN - MIN_LEN + 1) for _ in range(BATCH)]
        lengths.sort(reverse=True)
        T = lengths[0]
        ids = [[0] * BATCH for _ in range(T)]
        tags = [[-1] * BATCH for _ in range(T)]
        for b in range(BATCH):
            for t in range(lengths[b]):
                ids[t][b] = 2 + rng.next() % (VOCAB - 2)
        labels = [rng.next() % CLASSES for _ in range(BATCH)]
        for b in range(BATCH):
            for t in range(lengths[b]):
                tags[t][b] = rng.next() % TAGS
        batches.append((lengths, ids, labels, tags))
    return batches


def flops_per_token(cell, hidden, bidirectional):
    gates = 4 if cell == "lstm" else 3
    dirs = 2 if bidirectional else 1
    forward = 2 * gates * hidden * (EMBED + hidden) * dirs
    return 3 * forward  # backward counted as twice the forward


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--seconds", type=float, default=3.0, help="measured time per workload")
    ap.add_argument("--workloads", default=",".join(WORKLOADS), help="comma-separated subset")
    ap.add_argument("--variant", default="default", help="label copied into the output (run settings)")
    ap.add_argument("--info", action="store_true", help="print the BLAS/threads in use as JSON first")
    ap.add_argument("--dense-embedding-grad", action="store_true",
                    help="dense [V x E] embedding gradient instead of torch's sparse one")
    args = ap.parse_args()

    import torch
    import torch.nn as nn
    import torch.nn.functional as F
    from torch.nn.utils.rnn import pack_padded_sequence, pad_packed_sequence

    limiter = limit_threads(torch, args.threads)
    torch.manual_seed(SEED & 0xFFFFFFFF)
    if args.info:
        print(json.dumps(blas_info(torch)), flush=True)

    class Model(nn.Module):
        def __init__(self, cell, hidden, bidirectional):
            super().__init__()
            self.emb = nn.Embedding(VOCAB, EMBED, padding_idx=0, sparse=not args.dense_embedding_grad)
            rnn = nn.LSTM if cell == "lstm" else nn.GRU
            self.rnn = rnn(EMBED, hidden, num_layers=1, bidirectional=bidirectional)
            self.per_token = bidirectional
            out = hidden * (2 if bidirectional else 1)
            self.head = nn.Linear(out, TAGS if bidirectional else CLASSES)

        def forward(self, ids, lengths, labels, tags):
            x = self.emb(ids)  # [T x B x E]
            packed = pack_padded_sequence(x, lengths, enforce_sorted=True)
            out, state = self.rnn(packed)
            if self.per_token:
                padded, _ = pad_packed_sequence(out)
                logits = self.head(padded)
                return F.cross_entropy(logits.view(-1, TAGS), tags.view(-1), ignore_index=-1)
            h_n = state[0] if isinstance(state, tuple) else state
            return F.cross_entropy(self.head(h_n[-1]), labels)

    batches = []
    for lengths, ids, labels, tags in make_batches():
        batches.append((torch.tensor(ids, dtype=torch.long), torch.tensor(lengths, dtype=torch.long),
                        torch.tensor(labels, dtype=torch.long), torch.tensor(tags, dtype=torch.long),
                        sum(lengths)))

    for name in args.workloads.split(","):
        cell, hidden, bidirectional = WORKLOADS[name]
        model = Model(cell, hidden, bidirectional)

        def run(batch):
            ids, lengths, labels, tags, _ = batch
            model.zero_grad(set_to_none=True)
            loss = model(ids, lengths, labels, tags)
            loss.backward()
            return loss.item()

        for i in range(2):  # warm-up (allocator, OpenBLAS buffers)
            run(batches[i])
        best_wall = best_cpu = 0.0
        repeats = 3
        n = 0
        for _ in range(repeats):
            tokens = 0
            done = 0
            start, cpu_start = time.perf_counter(), time.process_time()
            while True:
                batch = batches[n % POOL]
                run(batch)
                tokens += batch[4]
                n += 1
                done += 1
                elapsed = time.perf_counter() - start
                if elapsed >= args.seconds / repeats and done >= 2:
                    break
            cpu = time.process_time() - cpu_start
            best_wall = max(best_wall, tokens / elapsed)
            # CPU time of all threads (as bench_rnn): immune to time-slicing with one thread.
            best_cpu = max(best_cpu, tokens / cpu * args.threads)
        print(json.dumps({"side": "torch", "workload": name, "threads": args.threads, "variant": args.variant,
                          "tokens_per_s": round(best_wall, 1), "tokens_per_cpu_s": round(best_cpu, 1),
                          "gflops": best_wall * flops_per_token(cell, hidden, bidirectional) / 1e9}), flush=True)
    if limiter is not None:
        limiter.restore_original_limits()


if __name__ == "__main__":
    sys.exit(main())
