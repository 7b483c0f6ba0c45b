#!/usr/bin/python3
"""Writes tests/fixtures/chars/char_cnn.json for tests/nn/test_char_cnn.cpp: the character CNN word
encoder (gyre/nn/char_cnn.hpp) computed by Debian's python3-torch.

Run: /usr/bin/python3 tools/make_char_fixtures.py

Seeded float32 weights; 5 tokens of 0, 1, 2, 4 and 7 characters (char ids in [1, Vc), the empty
token stands for a padding cell of a batch grid). Per token: torch.nn.functional.embedding ->
conv1d(padding=w//2) over that token alone (so zeros lie outside every token) -> max over its
positions -> tanh; the empty token's output is 0. Reference computed in float64 from the float32
weights; L = sum(G * Y) with a seeded G, and the gradients of L w.r.t. the embedding table, the
convolution weight (stored in gyre's layout [F x w*Ec]: column k*Ec + e = torch weight[f, e, k])
and the bias.
"""
import json
import os

import torch

OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "fixtures", "chars")


def flat(t):
    return [float(f"{v:.12g}") for v in t.detach().reshape(-1).tolist()]


def main():
    torch.manual_seed(1202)
    vc, ec, filters, width = 11, 4, 6, 3
    emb32 = (torch.randn(vc, ec) * 0.5).float()
    emb32[0] = 0
    conv32 = (torch.randn(filters, ec, width) * 0.5).float()
    bias32 = (torch.randn(filters) * 0.1).float()
    lengths = [0, 1, 2, 4, 7]
    ids = [int(v) for v in torch.randint(1, vc, (sum(lengths),))]
    ids[3] = ids[4] = 5  # a repeated character inside one token
    offsets = [0]
    for n in lengths:
        offsets.append(offsets[-1] + n)
    g = torch.randn(len(lengths), filters).double()

    emb = emb32.double().requires_grad_()
    conv = conv32.double().requires_grad_()
    bias = bias32.double().requires_grad_()
    rows = []
    for n in range(len(lengths)):
        chars = torch.tensor(ids[offsets[n]:offsets[n + 1]], dtype=torch.long)
        if len(chars) == 0:
            rows.append(torch.zeros(filters, dtype=torch.float64))
            continue
        x = torch.nn.functional.embedding(chars, emb).t().unsqueeze(0)  # [1 x Ec x L]
        z = torch.nn.functional.conv1d(x, conv, bias, padding=width // 2)  # [1 x F x L]
        rows.append(torch.tanh(z[0].max(dim=1).values))
    y = torch.stack(rows)
    (g * y).sum().backward()
    conv_gyre = conv.detach().permute(0, 2, 1).reshape(filters, width * ec)
    conv_grad_gyre = conv.grad.permute(0, 2, 1).reshape(filters, width * ec)
    fixture = {
        "made_by": "/usr/bin/python3 tools/make_char_fixtures.py", "torch_version": torch.__version__,
        "vocab": vc, "embedding_size": ec, "filters": filters, "width": width,
        "ids": ids, "offsets": offsets,
        "embedding": flat(emb32), "conv_weight": flat(conv_gyre.float()), "conv_bias": flat(bias32),
        "g": flat(g), "y": flat(y),
        "d_embedding": flat(emb.grad), "d_conv_weight": flat(conv_grad_gyre), "d_conv_bias": flat(bias.grad),
    }
    os.makedirs(OUT, exist_ok=True)
    path = os.path.join(OUT, "char_cnn.json")
    with open(path, "w", encoding="utf-8") as f:
        json.dump(fixture, f)
        f.write("\n")
    print(f"wrote {path}")


if __name__ == "__main__":
    main()
