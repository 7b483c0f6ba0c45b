#!/usr/bin/python3
"""Writes the torch-parity fixtures of tests/nn/test_torch_parity.cpp into tests/fixtures/rnn/.

Run with Debian's interpreter (python3-torch): /usr/bin/python3 tools/make_rnn_fixtures.py

For LSTM and GRU, 1 and 2 layers, uni- and bidirectional, it builds torch.nn.LSTM/GRU with float32
random weights, runs a padded time-major batch through it as a packed sequence
(pack_padded_sequence, enforce_sorted=False), and records the outputs (zero at padding), the final
states, and the gradients of the scalar L = sum(G * out) w.r.t. the input and every weight. The
reference is computed in float64 from the float32 weights, so it is exact to ~1e-15 and the C++
float32 result is compared against it. Weights are stored under gyre's tensor names
(DEVELOPERS.md): LSTM b_input = b_ih + b_hh (their gradients are equal, stored once); GRU
b_input = b_ih, b_hidden = b_hh. Gate order is the same in both (LSTM [i f g o]; GRU reset, update,
candidate, which torch calls [r z n] and gyre [r z h~]).

Also writes loss.json: torch.nn.functional.cross_entropy with class weights and label smoothing,
and binary_cross_entropy_with_logits, with their gradients.
"""
import json
import os
import sys

import torch
from torch.nn.utils.rnn import pack_padded_sequence, pad_packed_sequence

OUT_DIR = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "fixtures", "rnn")
GENERATOR = "tools/make_rnn_fixtures.py"


def flat(t):
    # %.9g round-trips a float32; float64 references keep 12 significant digits (plenty for 1e-5).
    return [float("%.12g" % v) for v in t.detach().reshape(-1).tolist()]


def f32(t):
    return [float("%.9g" % v) for v in t.detach().float().reshape(-1).tolist()]


def make_rnn(cell, layers, bidirectional, seed, wide=False):
    torch.manual_seed(seed)
    T, B, D, H = 4, 3, 3, 3
    lengths = [4, 2, 3]
    scale = 0.6
    if wide:
        # Sizes that take gyre's AVX-512 path (hidden a multiple of 16, two unit panels), with more
        # rows than one register tile and ragged lengths (ties, a length-1 sequence).
        T, B, D, H = 9, 14, 20, 32
        lengths = [9, 3, 7, 9, 1, 5, 8, 2, 9, 6, 4, 7, 3, 8]
        scale = 0.25
    cls = torch.nn.LSTM if cell == "lstm" else torch.nn.GRU
    rnn = cls(input_size=D, hidden_size=H, num_layers=layers, bidirectional=bidirectional)
    with torch.no_grad():
        for p in rnn.parameters():
            p.uniform_(-scale, scale)  # larger than torch's default so every gate saturates a little
    x32 = torch.empty(T, B, D).uniform_(-1.0, 1.0)  # padding positions hold random values too
    dirs = 2 if bidirectional else 1
    g32 = torch.empty(T, B, H * dirs).uniform_(-1.0, 1.0)

    rnn = rnn.double()
    x = x32.double().requires_grad_(True)
    packed = pack_padded_sequence(x, torch.tensor(lengths), enforce_sorted=False)
    out_packed, state = rnn(packed)
    out, _ = pad_packed_sequence(out_packed, total_length=T)
    loss = (g32.double() * out).sum()
    loss.backward()
    h_n = state[0] if cell == "lstm" else state
    c_n = state[1] if cell == "lstm" else None

    params = {}
    for k in range(layers):
        for d in range(dirs):
            sfx = "_l%d%s" % (k, "_reverse" if d == 1 else "")
            name = "rnn.l%d.%s" % (k, "bwd" if d == 1 else "fwd")
            w_ih = getattr(rnn, "weight_ih" + sfx)
            w_hh = getattr(rnn, "weight_hh" + sfx)
            b_ih = getattr(rnn, "bias_ih" + sfx)
            b_hh = getattr(rnn, "bias_hh" + sfx)
            params[name + ".w_input"] = {"shape": list(w_ih.shape), "value": f32(w_ih), "grad": flat(w_ih.grad)}
            params[name + ".w_hidden"] = {"shape": list(w_hh.shape), "value": f32(w_hh), "grad": flat(w_hh.grad)}
            if cell == "lstm":
                # b_ih and b_hh enter the gates only through their sum, so one bias carries both;
                # the sum is formed in float32 like the C++ side will hold it.
                b = (b_ih.float() + b_hh.float())
                params[name + ".b_input"] = {"shape": [1, b.numel()], "value": f32(b), "grad": flat(b_ih.grad)}
            else:
                params[name + ".b_input"] = {"shape": [1, b_ih.numel()], "value": f32(b_ih), "grad": flat(b_ih.grad)}
                params[name + ".b_hidden"] = {"shape": [1, b_hh.numel()], "value": f32(b_hh),
                                                 "grad": flat(b_hh.grad)}
    fixture = {
        "generator": GENERATOR,
        "reference": "torch %s, torch.nn.%s on a packed sequence, float64" % (torch.__version__, cls.__name__),
        "cell": cell,
        "layers": layers,
        "bidirectional": bidirectional,
        "T": T, "B": B, "input_size": D, "hidden_size": H,
        "lengths": lengths,
        "x": f32(x32),          # [T, B, D] time-major = gyre's [T*B x D]
        "g": f32(g32),          # dL/d out
        "out": flat(out),       # [T, B, H*dirs], zero at padding
        "h_n": flat(h_n),       # [layers*dirs, B, H], index layer*dirs + dir
        "c_n": flat(c_n) if c_n is not None else [],
        "d_x": flat(x.grad),    # zero at padding
        "params": params,
    }
    return fixture


def make_loss():
    torch.manual_seed(5)
    N, C = 5, 4
    logits = torch.empty(N, C).uniform_(-3.0, 3.0)
    targets = torch.tensor([0, 3, 1, 1, 2])
    weights = torch.tensor([0.5, 2.0, 1.0, 1.5])
    cases = []
    for w, eps in [(None, 0.0), (None, 0.1), (weights, 0.0), (weights, 0.2)]:
        x = logits.double().requires_grad_(True)
        loss = torch.nn.functional.cross_entropy(x, targets, weight=None if w is None else w.double(),
                                                 label_smoothing=eps)
        loss.backward()
        cases.append({"class_weights": [] if w is None else f32(w), "label_smoothing": eps,
                      "loss": float("%.12g" % loss.item()), "d_logits": flat(x.grad)})
    y = (torch.empty(N, C).uniform_() > 0.5).float()
    big = torch.empty(N, C).uniform_(-30.0, 30.0)  # exercises the stable form at large |x|
    bce = []
    for lg in (logits, big):
        x = lg.double().requires_grad_(True)
        loss = torch.nn.functional.binary_cross_entropy_with_logits(x, y.double())
        loss.backward()
        bce.append({"logits": f32(lg), "loss": float("%.12g" % loss.item()), "d_logits": flat(x.grad)})
    return {
        "generator": GENERATOR,
        "reference": "torch %s, torch.nn.functional.cross_entropy / binary_cross_entropy_with_logits, float64"
                     % torch.__version__,
        "N": N, "C": C,
        "logits": f32(logits), "targets": targets.tolist(), "cross_entropy": cases,
        "bce_targets": f32(y), "bce": bce,
    }


def main():
    os.makedirs(OUT_DIR, exist_ok=True)
    seed = 20261201
    for cell in ("lstm", "gru"):
        for layers in (1, 2):
            for bi in (False, True):
                fx = make_rnn(cell, layers, bi, seed)
                seed += 1
                path = os.path.join(OUT_DIR, "%s_l%d_%s.json" % (cell, layers, "bi" if bi else "uni"))
                with open(path, "w") as f:
                    json.dump(fx, f, separators=(",", ":"))
                    f.write("\n")
                print("wrote", path, os.path.getsize(path), "bytes")
    for cell in ("lstm", "gru"):
        fx = make_rnn(cell, 1, True, seed, wide=True)
        seed += 1
        path = os.path.join(OUT_DIR, "%s_wide.json" % cell)
        with open(path, "w") as f:
            json.dump(fx, f, separators=(",", ":"))
            f.write("\n")
        print("wrote", path, os.path.getsize(path), "bytes")
    path = os.path.join(OUT_DIR, "loss.json")
    with open(path, "w") as f:
        json.dump(make_loss(), f, separators=(",", ":"))
        f.write("\n")
    print("wrote", path, os.path.getsize(path), "bytes")
    return 0


if __name__ == "__main__":
    sys.exit(main())
