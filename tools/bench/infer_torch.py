#!/usr/bin/python3
"""Reference side of the inference benchmark (tools/bench/run_infer_bench.sh).

Reads an f32 gyre model file (docs/model-format.md) with struct, loads its weights into
python3-torch modules (embedding -> nn.LSTM -> pooling -> linear -> softmax), and measures eager
inference under torch.inference_mode(): batch-1 latency (p50/p99) for one text of --tokens
tokens, and batch throughput (texts/s) for --batch texts of --tokens tokens.

  /usr/bin/python3 tools/bench/infer_torch.py MODEL.gyre --threads 1 [--seconds 2]
  /usr/bin/python3 tools/bench/infer_torch.py MODEL.gyre --dump-probs N   (parity inputs/outputs)

Prints one JSON object per line on stdout.
"""

import argparse
import json
import random
import re
import struct
import sys
import time

from torch_ref import blas_info, limit_threads

MAGIC = b"gyre.mf\x00"
TEMPERATURE = 1.0  # set from the model file's header in main()


def read_model(path):
    """(header dict, {name: numpy float32 array}) of an f32 gyre model file (docs/model-format.md)."""
    import numpy as np
    data = open(path, "rb").read()
    if len(data) < 72 or data[:8] != MAGIC:
        sys.exit(f"infer_torch: {path}: not a gyre model file")
    version, bom, file_size, header_offset, header_size, table_offset, count, data_offset = \
        struct.unpack_from("<IIQQQQQQ", data, 8)
    if version != 2 or bom != 0x0A0B0C0D or file_size != len(data) or header_offset != 64:
        sys.exit(f"infer_torch: {path}: unsupported preamble (version {version})")
    header = json.loads(data[64:64 + header_size].decode("utf-8"))
    tensors = {}
    pos = table_offset
    for _ in range(count):
        name_len, dtype, rank, _reserved = struct.unpack_from("<IBBH", data, pos)
        dims = struct.unpack_from(f"<{rank}Q", data, pos + 8)
        t_off, t_size, _scales = struct.unpack_from("<QQQ", data, pos + 8 + 8 * rank)
        name = data[pos + 32 + 8 * rank:pos + 32 + 8 * rank + name_len].decode("utf-8")
        pos += 32 + 8 * rank + ((name_len + 7) // 8) * 8
        if dtype != 0:
            sys.exit(f"infer_torch: {path}: tensor {name} is not f32 (export with --precision f32)")
        n = 1
        for d in dims:
            n *= d
        if t_size != 4 * n:
            sys.exit(f"infer_torch: {path}: tensor {name}: data_size {t_size} != 4 x {n}")
        tensors[name] = np.frombuffer(data, dtype="<f4", count=n, offset=t_off).reshape(dims).copy()
    return header, tensors


def build(torch, header, t):
    """embedding, LSTM, head modules holding the file's weights, and the pooling name."""
    arch = header["architecture"]
    if arch["task"] != "classify" or arch["cell"] != "lstm" or arch["bidirectional"] or arch["layers"] != 1 \
            or arch["output"] != "softmax":
        sys.exit("infer_torch: only a 1-layer unidirectional LSTM softmax classifier is supported")
    emb_w = torch.from_numpy(t["tokens.vectors"])
    vocab, embed = emb_w.shape
    hidden = arch["hidden_size"]
    emb = torch.nn.Embedding(vocab, embed)
    lstm = torch.nn.LSTM(embed, hidden, batch_first=True)
    head_w = torch.from_numpy(t["readout.w"])
    head = torch.nn.Linear(hidden, head_w.shape[0])
    with torch.no_grad():
        emb.weight.copy_(emb_w)
        # Gate rows [i f g o] in both (docs/model-format.md; torch.nn.LSTM documentation).
        lstm.weight_ih_l0.copy_(torch.from_numpy(t["rnn.l0.fwd.w_input"]))
        lstm.weight_hh_l0.copy_(torch.from_numpy(t["rnn.l0.fwd.w_hidden"]))
        lstm.bias_ih_l0.copy_(torch.from_numpy(t["rnn.l0.fwd.b_input"]).reshape(-1))
        lstm.bias_hh_l0.zero_()  # gyre has a single LSTM bias
        head.weight.copy_(head_w)
        head.bias.copy_(torch.from_numpy(t["readout.b"]).reshape(-1))
    for m in (emb, lstm, head):
        m.eval()
    return emb, lstm, head, arch["pooling"]


def forward(torch, emb, lstm, head, pooling, ids):
    """ids: [B x T] int64, no padding. Returns probabilities [B x C]."""
    out, (h, _c) = lstm(emb(ids))
    if pooling == "mean":
        pooled = out.mean(dim=1)
    elif pooling == "max":
        pooled = out.max(dim=1).values
    else:
        pooled = h[-1]
    # Temperature scaling fitted at the end of training (header "architecture.temperature",
    # docs/model-format.md): gyre reports softmax(z / T), so the reference does too.
    return torch.softmax(head(pooled) / TEMPERATURE, dim=-1)


def percentile(xs, q):
    xs = sorted(xs)
    return xs[min(len(xs) - 1, int(round(q * (len(xs) - 1))))]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("model")
    ap.add_argument("--threads", type=int, default=1)
    ap.add_argument("--tokens", type=int, default=20)
    ap.add_argument("--batch", type=int, default=64)
    ap.add_argument("--seconds", type=float, default=2.0)
    ap.add_argument("--variant", default="", help="label recorded in the JSON line (e.g. omp-passive)")
    ap.add_argument("--info", action="store_true", help="print the BLAS/thread info line first")
    ap.add_argument("--dump-probs", type=int, default=0, metavar="N",
                    help="print N random texts of vocabulary words and their probabilities, then exit")
    args = ap.parse_args()

    import torch
    limit_threads(torch, args.threads)
    header, tensors = read_model(args.model)
    emb, lstm, head, pooling = build(torch, header, tensors)
    global TEMPERATURE
    TEMPERATURE = float(header["architecture"].get("temperature", [1.0])[0])
    vocab = header["vocabulary"]
    rng = random.Random(20261201)

    if args.info:
        print(json.dumps(blas_info(torch)))

    if args.dump_probs:
        # Plain lower-case ASCII words tokenize to themselves (one token each, already folded), so
        # gyre predict on "w1 w2 ..." sees exactly these ids.
        words = [i for i, w in enumerate(vocab) if i >= 2 and re.fullmatch(r"[a-z]+", w)]
        with torch.inference_mode():
            for _ in range(args.dump_probs):
                ids = [rng.choice(words) for _ in range(rng.randint(1, 30))]
                p = forward(torch, emb, lstm, head, pooling, torch.tensor([ids], dtype=torch.int64))[0]
                print(json.dumps({"text": " ".join(vocab[i] for i in ids),
                                  "probs": dict(zip(header["labels"], p.double().tolist()))}))
        return

    ids1 = torch.tensor([[rng.randrange(2, len(vocab)) for _ in range(args.tokens)]], dtype=torch.int64)
    idsb = torch.tensor([[rng.randrange(2, len(vocab)) for _ in range(args.tokens)] for _ in range(args.batch)],
                        dtype=torch.int64)
    with torch.inference_mode():
        p = forward(torch, emb, lstm, head, pooling, idsb)
        sums = p.sum(dim=1)
        proper = bool(((sums - 1).abs() < 1e-5).all() and (p >= 0).all())
        for _ in range(20):  # warm-up
            forward(torch, emb, lstm, head, pooling, ids1)
        lat = []
        deadline = time.perf_counter() + args.seconds / 2
        while time.perf_counter() < deadline or len(lat) < 50:
            t0 = time.perf_counter()
            forward(torch, emb, lstm, head, pooling, ids1)
            lat.append(time.perf_counter() - t0)
        forward(torch, emb, lstm, head, pooling, idsb)
        batches = 0
        t0 = time.perf_counter()
        c0 = time.process_time()
        while time.perf_counter() - t0 < args.seconds / 2 or batches < 5:
            forward(torch, emb, lstm, head, pooling, idsb)
            batches += 1
        wall = time.perf_counter() - t0
        cpu = time.process_time() - c0
    print(json.dumps({"side": "torch", "variant": args.variant, "threads": args.threads, "tokens": args.tokens, "batch": args.batch,
                      "pooling": pooling, "proper_distribution": proper,
                      "p50_us": 1e6 * percentile(lat, 0.5), "p99_us": 1e6 * percentile(lat, 0.99),
                      "latency_runs": len(lat), "texts_per_s": batches * args.batch / wall,
                      "texts_per_cpu_s": batches * args.batch / cpu}))


if __name__ == "__main__":
    main()
