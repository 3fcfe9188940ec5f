"""Where one training step's time goes: per layer, per layer kind, and per function.

The network's layers are timed by wrapping each layer object's ``forward``
and ``backward`` (instance attributes, so the engine's code is untouched);
the loss and the optimiser update are timed beside them. A cProfile of a few
unwrapped steps then shows the Python-level functions (a Numba kernel is one
entry). Figures are milliseconds per step, the mean over ``steps`` steps
after a warm-up.
"""

from __future__ import annotations

import cProfile
import io
import pstats
import time
from collections import defaultdict

import numpy as np

import _nets
import _timing


def _wrap(layer, key: str, acc: dict) -> None:
    """Replace ``layer.forward``/``backward`` with timed calls adding seconds to ``acc``."""
    fwd, bwd = layer.forward, layer.backward

    def forward(x, training=False):
        t = time.perf_counter()
        out = fwd(x, training)
        acc[key]["fwd"] += time.perf_counter() - t
        return out

    def backward(g):
        t = time.perf_counter()
        out = bwd(g)
        acc[key]["bwd"] += time.perf_counter() - t
        return out

    layer.forward, layer.backward = forward, backward


def layer_times(name: str, steps: int = 20, mode: str = "train") -> dict:
    """Mean seconds per step of each layer's forward and backward, the loss and the update.

    Returns
    -------
    dict
        ``rows``: list of (index, op name, kind, out shape, fwd s, bwd s);
        ``loss_s``, ``update_s``, ``step_s`` (wrapped whole step), ``plain_step_s``
        (the same step unwrapped, to show the wrappers cost nothing that matters).
    """
    from tinyconv.losses import softmax_cross_entropy
    from tinyconv.optim import SGD

    text = _nets.REFERENCE[name][0]
    batch = _nets.TRAIN_BATCH if mode == "train" else _nets.INFER_BATCH
    x, y = _nets.random_batch(text, batch, seed=1)

    plain_net = _nets.ours_network(text)
    plain = (_nets.ours_train_step(plain_net, x, y) if mode == "train"
             else _nets.ours_infer_step(plain_net, x))
    _timing.warm_up(plain, 3, 0.2)
    plain_s = _timing.time_block(plain, steps) / steps

    net = _nets.ours_network(text)
    acc: dict = defaultdict(lambda: {"fwd": 0.0, "bwd": 0.0})
    keys = []
    for i, (op, layer) in enumerate(zip(net.ops, net.layers)):
        key = f"{i}"
        keys.append((key, op))
        _wrap(layer, key, acc)
    opt = SGD(net.param_list(), momentum=_nets.MOMENTUM)
    extra = {"loss": 0.0, "update": 0.0}

    def step():
        logits = net.forward(x, training=mode == "train")
        if mode != "train":
            return
        t = time.perf_counter()
        _, grad = softmax_cross_entropy(logits, y)
        extra["loss"] += time.perf_counter() - t
        net.backward(grad)
        t = time.perf_counter()
        opt.update([g for _, g in net.grad_list()], _nets.LR)
        extra["update"] += time.perf_counter() - t

    _timing.warm_up(step, 3, 0.2)
    acc.clear()
    extra.update(loss=0.0, update=0.0)
    wrapped_s = _timing.time_block(step, steps) / steps
    rows = [(i, op.name, op.kind, "x".join(map(str, op.out_shape)),
             acc[key]["fwd"] / steps, acc[key]["bwd"] / steps)
            for i, (key, op) in enumerate(keys)]
    return {"net": name, "mode": mode, "batch": batch, "rows": rows,
            "loss_s": extra["loss"] / steps, "update_s": extra["update"] / steps,
            "step_s": wrapped_s, "plain_step_s": plain_s}


def by_kind(times: dict) -> dict[str, tuple[float, float]]:
    """Forward and backward seconds per step summed over layers of each kind."""
    out: dict[str, list[float]] = defaultdict(lambda: [0.0, 0.0])
    for _, _, kind, _, f, b in times["rows"]:
        out[kind][0] += f
        out[kind][1] += b
    return {k: (v[0], v[1]) for k, v in out.items()}


def top_functions(name: str, steps: int = 5, limit: int = 22) -> str:
    """cProfile of ``steps`` unwrapped training steps, sorted by own time."""
    text = _nets.REFERENCE[name][0]
    x, y = _nets.random_batch(text, _nets.TRAIN_BATCH, seed=1)
    step = _nets.ours_train_step(_nets.ours_network(text), x, y)
    _timing.warm_up(step, 3, 0.2)
    prof = cProfile.Profile()
    prof.enable()
    for _ in range(steps):
        step()
    prof.disable()
    buf = io.StringIO()
    pstats.Stats(prof, stream=buf).sort_stats("tottime").print_stats(limit)
    lines = [ln for ln in buf.getvalue().splitlines() if ln.strip()]
    start = next((i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls")), 0)
    return "\n".join(lines[start:])


def _table(t: dict) -> list[str]:
    ms = 1000.0
    lines = [f"{t['net']} {t['mode']} (batch {t['batch']}, 1 thread): step "
             f"{t['step_s'] * ms:.2f} ms wrapped, {t['plain_step_s'] * ms:.2f} ms plain "
             f"({t['batch'] / t['plain_step_s']:,.0f} img/s)",
             f"  {'#':>3} {'op':<14}{'kind':<9}{'out':<11}{'fwd ms':>9}{'bwd ms':>9}{'share':>8}"]
    for i, name, kind, shape, f, b in t["rows"]:
        lines.append(f"  {i:>3} {name:<14}{kind:<9}{shape:<11}{f * ms:>9.2f}{b * ms:>9.2f}"
                     f"{(f + b) / t['step_s']:>8.1%}")
    if t["mode"] == "train":
        lines.append(f"      {'loss':<34}{t['loss_s'] * ms:>9.2f}{'':>9}"
                     f"{t['loss_s'] / t['step_s']:>8.1%}")
        lines.append(f"      {'SGD update':<34}{t['update_s'] * ms:>9.2f}{'':>9}"
                     f"{t['update_s'] / t['step_s']:>8.1%}")
    lines.append("  by kind: " + "; ".join(
        f"{k} {f * ms:.2f}+{b * ms:.2f} ms ({(f + b) / t['step_s']:.0%})"
        for k, (f, b) in sorted(by_kind(t).items(), key=lambda kv: -sum(kv[1]))))
    return lines


def report(name: str, steps: int = 20) -> str:
    """The printed profile of one network: training and inference per layer, then cProfile."""
    lines = _table(layer_times(name, steps, "train")) + [""]
    lines += _table(layer_times(name, max(steps // 4, 2), "infer")) + [""]
    lines += [f"{name} training, cProfile of 5 steps (own time first):", top_functions(name), ""]
    return "\n".join(lines)
