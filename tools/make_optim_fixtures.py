#!/usr/bin/python3
"""Writes tests/optim/torch_optim_steps.txt: reference optimizer trajectories from Debian's
python3-torch (torch.optim.SGD / Adam / AdamW), used by tests/optim/test_torch_parity.cpp.

Run: /usr/bin/python3 tools/make_optim_fixtures.py
Format (whitespace-separated, '#' lines are comments):
  case <name> <optimizer> <momentum> <nesterov> <weight_decay> <steps> <rows> <cols>
  init <rows*cols floats>
  step <lr> grad <rows*cols floats> expect <rows*cols floats>     (one line per step)
Values are float32 printed with 9 significant digits (exact round trip).
"""

import torch

ROWS, COLS, STEPS = 3, 4, 6
CASES = [
    # name, optimizer, momentum, nesterov, weight_decay
    ("sgd_plain", "sgd", 0.0, False, 0.0),
    ("sgd_momentum_l2", "sgd", 0.9, False, 0.01),
    ("sgd_nesterov", "sgd", 0.9, True, 0.0),
    ("adam", "adam", 0.0, False, 0.0),
    ("adam_l2", "adam", 0.0, False, 0.05),
    ("adamw", "adamw", 0.0, False, 0.05),
]


def fmt(t):
    return " ".join(f"{v:.9g}" for v in t.reshape(-1).tolist())


def main():
    gen = torch.Generator().manual_seed(20261201)
    lines = [f"# made by tools/make_optim_fixtures.py with torch {torch.__version__} (float32)"]
    for name, kind, momentum, nesterov, wd in CASES:
        w = torch.nn.Parameter(torch.randn(ROWS, COLS, generator=gen))
        init = w.detach().clone()
        if kind == "sgd":
            opt = torch.optim.SGD([w], lr=0.1, momentum=momentum, nesterov=nesterov, weight_decay=wd)
        elif kind == "adam":
            opt = torch.optim.Adam([w], lr=0.1, betas=(0.9, 0.999), eps=1e-8, weight_decay=wd)
        else:
            opt = torch.optim.AdamW([w], lr=0.1, betas=(0.9, 0.999), eps=1e-8, weight_decay=wd)
        lines.append(f"case {name} {kind} {momentum} {int(nesterov)} {wd} {STEPS} {ROWS} {COLS}")
        lines.append("init " + fmt(init))
        for s in range(STEPS):
            lr = 0.1 * (1.0 - 0.1 * s)  # a changing rate, as a schedule would give
            for group in opt.param_groups:
                group["lr"] = lr
            grad = torch.randn(ROWS, COLS, generator=gen)
            w.grad = grad.clone()
            opt.step()
            lines.append(f"step {lr!r} grad {fmt(grad)} expect {fmt(w.detach())}")
    with open("tests/optim/torch_optim_steps.txt", "w") as f:
        f.write("\n".join(lines) + "\n")


if __name__ == "__main__":
    main()
