#!/usr/bin/python3
"""Reference fixtures for the gyre runtime, made with Debian's python3-torch.

Writes small LSTM/GRU models in the gyre model-file format (docs/model-format.md), written here
by an independent Python implementation of that format, and the probabilities PyTorch computes
for a few texts, so the runtime is checked against an implementation outside the project:

    /usr/bin/python3 tools/make_runtime_fixtures.py            # -> tests/fixtures/runtime/
    /usr/bin/python3 tools/make_runtime_fixtures.py --bench-model m.gyre --precision f32

PyTorch's nn.LSTM stacks gates [i f g o] and nn.GRU [r z n] (gyre: [r z h~]) with the reset gate applied after the
recurrent product, the same conventions as gyre (DEVELOPERS.md). nn.LSTM has two biases; gyre's
LSTM has one, their sum. The forward pass is run in float64 on weights rounded to float32.
"""
import argparse
import json
import os
import struct

import torch

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "fixtures", "runtime")


def crc32c(data: bytes) -> int:
    """CRC-32C (RFC 3720 B.4): reflected polynomial 0x82F63B78, init and final XOR 0xFFFFFFFF."""
    table = []
    for i in range(256):
        c = i
        for _ in range(8):
            c = (c >> 1) ^ 0x82F63B78 if c & 1 else c >> 1
        table.append(c)
    crc = 0xFFFFFFFF
    for b in data:
        crc = (crc >> 8) ^ table[(crc ^ b) & 0xFF]
    return crc ^ 0xFFFFFFFF


def align(v, a):
    return (v + a - 1) // a * a


def write_model(path, header, tensors):
    """tensors: list of (name, 2-D float tensor, dtype 'f32'|'f16'|'i8')."""
    hdr = json.dumps(header, separators=(",", ":"), ensure_ascii=False).encode("utf-8")
    table_offset = align(64 + len(hdr), 8)
    entries, payloads = [], []
    for name, t, dtype in tensors:
        t = t.detach().to(torch.float32).contiguous()
        rows, cols = t.shape
        scales = None
        if dtype == "f32":
            payload = t.numpy().astype("<f4").tobytes()
        elif dtype == "f16":
            payload = t.to(torch.float16).numpy().astype("<f2").tobytes()
        else:
            s = t.abs().amax(dim=1) / 127.0
            q = torch.where(s[:, None] > 0, torch.round(t / s[:, None].clamp_min(1e-38)), torch.zeros_like(t))
            payload = q.clamp(-127, 127).to(torch.int8).numpy().tobytes()
            scales = s.numpy().astype("<f4").tobytes()
        entries.append((name.encode(), {"f32": 0, "f16": 1, "i8": 2}[dtype], (rows, cols), payload, scales))
    table_bytes = sum(8 + 8 * 2 + 24 + align(len(e[0]), 8) for e in entries)
    data_offset = align(table_offset + table_bytes, 64)
    pos = data_offset
    placed = []
    for e in entries:
        off = pos
        pos = align(pos + len(e[3]), 64)
        soff = 0
        if e[4] is not None:
            soff = pos
            pos = align(pos + len(e[4]), 64)
        placed.append((off, soff))
    file_size = pos + 8
    buf = bytearray(file_size)
    struct.pack_into("<8sIIQQQQQQ", buf, 0, b"gyre.mf\0", 2, 0x0A0B0C0D, file_size, 64, len(hdr), table_offset,
                     len(entries), data_offset)
    buf[64:64 + len(hdr)] = hdr
    p = table_offset
    for (name, code, shape, payload, scales), (off, soff) in zip(entries, placed):
        struct.pack_into("<IBBH", buf, p, len(name), code, len(shape), 0)
        p += 8
        for d in shape:
            struct.pack_into("<Q", buf, p, d)
            p += 8
        struct.pack_into("<QQQ", buf, p, off, len(payload), soff)
        p += 24
        buf[p:p + len(name)] = name
        p += align(len(name), 8)
        buf[off:off + len(payload)] = payload
        if scales is not None:
            buf[soff:soff + len(scales)] = scales
    struct.pack_into("<I4s", buf, file_size - 8, crc32c(bytes(buf[:file_size - 8])), b"gend")
    with open(path, "wb") as f:
        f.write(buf)


def f32(t):
    return t.detach().to(torch.float32).to(torch.float64)


def build(cell, E, H, layers, bidir, V, labels, seed, task="classify", pooling="last", output="softmax"):
    torch.manual_seed(seed)
    emb = torch.randn(V, E) * 0.5
    rnn_cls = torch.nn.LSTM if cell == "lstm" else torch.nn.GRU
    rnn = rnn_cls(E, H, num_layers=layers, bidirectional=bidir, batch_first=True)
    with torch.no_grad():
        for p in rnn.parameters():
            p.uniform_(-0.6, 0.6)
    F = H * (2 if bidir else 1)
    head = torch.nn.Linear(F, len(labels))
    with torch.no_grad():
        head.weight.uniform_(-1.0, 1.0)
        head.bias.uniform_(-0.3, 0.3)
    # Round everything to float32 values, then run in float64.
    rnn = rnn.double()
    with torch.no_grad():
        for p in rnn.parameters():
            p.copy_(f32(p))
    tensors = [("tokens.vectors", emb, "f32")]
    for k in range(layers):
        for d, dname in enumerate(["fwd", "bwd"][: 2 if bidir else 1]):
            sfx = f"_l{k}" + ("_reverse" if d == 1 else "")
            w_ih = getattr(rnn, "weight_ih" + sfx)
            w_hh = getattr(rnn, "weight_hh" + sfx)
            b_ih = getattr(rnn, "bias_ih" + sfx)
            b_hh = getattr(rnn, "bias_hh" + sfx)
            pre = f"rnn.l{k}.{dname}."
            tensors.append((pre + "w_input", w_ih, "f32"))
            tensors.append((pre + "w_hidden", w_hh, "f32"))
            if cell == "lstm":
                # gyre's one LSTM bias = b_ih + b_hh; the sum is rounded to float32 and the
                # float64 model uses that same rounded sum (put in b_ih, b_hh zeroed).
                b = f32(b_ih + b_hh)
                with torch.no_grad():
                    b_ih.copy_(b)
                    b_hh.zero_()
                tensors.append((pre + "b_input", b[None, :], "f32"))
            else:
                tensors.append((pre + "b_input", b_ih[None, :], "f32"))
                tensors.append((pre + "b_hidden", b_hh[None, :], "f32"))
    tensors.append(("readout.w", head.weight, "f32"))
    tensors.append(("readout.b", head.bias[None, :], "f32"))
    arch = {"task": task, "cell": cell, "embedding_size": E, "hidden_size": H, "layers": layers,
            "bidirectional": bidir, "output": output}
    if task == "classify":
        arch["pooling"] = pooling
    else:
        arch["tag_scheme"] = "bio"
    header = {"format": "gyre-model", "architecture": arch, "labels": labels,
              "tokenizer": {"mode": "whitespace", "nfkc": False, "case_fold": False, "fold_digits": False,
                            "keep_punctuation": True, "max_tokens": 0},
              "vocabulary": ["<pad>", "<unk>"] + [f"t{i}" for i in range(2, V)]}

    def forward(ids):
        x = f32(emb)[torch.tensor(ids)][None, :, :]
        out, _ = rnn(x)
        out = out[0]  # [T x F]
        W, b = f32(head.weight), f32(head.bias)
        if task == "tag":
            return torch.softmax(out @ W.T + b, dim=1)
        if pooling == "last":
            pooled = out[-1, :H]
            if bidir:
                pooled = torch.cat([pooled, out[0, H:]])
        elif pooling == "mean":
            pooled = out.mean(dim=0)
        else:
            pooled = out.max(dim=0).values
        return torch.softmax(pooled @ W.T + b, dim=0)

    return header, tensors, forward


CONFIGS = [
    # name, cell, E, H, layers, bidir, V, labels, seed, task, pooling
    ("torch_lstm_uni_last", "lstm", 6, 5, 1, False, 20, ["book", "cancel", "billing"], 1, "classify", "last"),
    ("torch_lstm_bi2_mean", "lstm", 6, 5, 2, True, 20, ["book", "cancel", "billing", "praise"], 2, "classify", "mean"),
    ("torch_gru_bi_last", "gru", 7, 4, 1, True, 20, ["pos", "neu", "neg"], 3, "classify", "last"),
    ("torch_gru_uni2_max", "gru", 5, 6, 2, False, 20, ["pos", "neu", "neg"], 4, "classify", "max"),
    ("torch_gru_bi_tag", "gru", 6, 5, 1, True, 20, ["O", "B-date", "I-date", "B-part"], 5, "tag", "last"),
]


def main():
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--bench-model", help="write one random model of demo size to this path instead")
    ap.add_argument("--precision", default="f32", choices=["f32", "f16", "i8"])
    ap.add_argument("--hidden-size", type=int, default=128)
    ap.add_argument("--embedding-size", type=int, default=64)
    ap.add_argument("--vocabulary", type=int, default=5000)
    ap.add_argument("--labels", type=int, default=8)
    args = ap.parse_args()
    if args.bench_model:
        header, tensors, _ = build("lstm", args.embedding_size, args.hidden_size, 1, False, args.vocabulary,
                                   [f"label{i}" for i in range(args.labels)], 9)
        header["architecture"]["pooling"] = "last"
        quant = lambda n: args.precision if n.endswith(("vectors", "readout.w", "w_input", "w_hidden")) else "f32"
        write_model(args.bench_model, header, [(n, t, quant(n)) for n, t, _ in tensors])
        return
    os.makedirs(OUT, exist_ok=True)
    gen = torch.Generator().manual_seed(1234)
    lines = ["# made by tools/make_runtime_fixtures.py (python3-torch " + torch.__version__ + "); "
             "model<TAB>text<TAB>probabilities (classify: one row; tag: rows joined by ';')"]
    for name, cell, E, H, layers, bidir, V, labels, seed, task, pooling in CONFIGS:
        header, tensors, forward = build(cell, E, H, layers, bidir, V, labels, seed, task, pooling)
        header["made_by"] = "tools/make_runtime_fixtures.py"
        write_model(os.path.join(OUT, name + ".gyre"), header, tensors)
        for T in (1, 2, 5, 9):
            ids = torch.randint(1, V, (T,), generator=gen).tolist()
            text = " ".join("unknown-word" if i == 1 else f"t{i}" for i in ids)
            with torch.no_grad():
                p = forward(ids)
            rows = [p] if task == "classify" else list(p)
            lines.append(f"{name}\t{text}\t" + ";".join(" ".join(f"{v:.9g}" for v in r.tolist()) for r in rows))
    # Expected output of tools/embed-demo (arg-max label, probability to 4 decimals) on the
    # classifier torch_lstm_uni_last, for the find_package consumer test.
    header, tensors, forward = build(*CONFIGS[0][1:])
    demo = ["# made by tools/make_runtime_fixtures.py; text<TAB>label<TAB>probability (python3-torch)"]
    for T in (1, 3, 4, 6, 8, 12):
        ids = torch.randint(1, CONFIGS[0][6], (T,), generator=gen).tolist()
        with torch.no_grad():
            p = forward(ids)
        best = int(p.argmax())
        demo.append(" ".join(f"t{i}" for i in ids) + f"\t{CONFIGS[0][7][best]}\t{float(p[best]):.4f}")
    with open(os.path.join(OUT, "embed_demo_expected.tsv"), "w") as f:
        f.write("\n".join(demo) + "\n")
    with open(os.path.join(OUT, "torch_expected.tsv"), "w") as f:
        f.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
