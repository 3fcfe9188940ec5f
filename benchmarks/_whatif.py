"""What would the engine gain: variants of one training step, set up through the layers' hooks.

Each variant is our own network with the same seed, changed only through the
optional hooks the layers already offer (``tinyconv.layers`` docstring) or by
reordering two parameter-free layers, in this process only; the engine's
files are not changed. Variants:

* ``no first input grad``: the first layer's ``input_grad = False`` (nobody
  reads the gradient with respect to the images);
* ``fused ReLU``: conv/dense built with ``relu=True`` semantics (bias and ReLU
  in one pass, mask applied in the layer's backward) and the ReLU layer after
  it replaced by a pass-through (no change where the engine already fuses);
* ``pool before ReLU``: a ReLU directly followed by a max pool swapped, since
  ``maxpool(relu(x)) == relu(maxpool(x))`` (max is monotone), so ReLU runs on
  a map s^2 times smaller;
* ``all``: the first two together with the third where it applies;
* ``plain again``: the plain network once more (a control for the noise).

Before timing, each variant's loss and gradients after one step from the
same weights are compared with the plain network's, so a variant that
changes the arithmetic is reported, not timed as if equal.
"""

from __future__ import annotations

import numpy as np

import _nets
import _timing
from tinyconv.layers.base import Layer

#: "plain again" is a second, identical plain network timed last: the control
#: whose distance from 1.00 shows the noise floor of the comparison.
VARIANTS = ("plain", "no first input grad", "fused ReLU", "pool before ReLU", "all",
            "plain again")


def build_variant(text: str, variant: str):
    """Our network for ``text`` changed as ``variant`` says (same seed, same weights)."""
    net = _nets.ours_network(text)
    layers, ops = list(net.layers), net.ops
    first_off = variant in ("no first input grad", "all")
    fuse = variant in ("fused ReLU", "all")
    swap = variant in ("pool before ReLU", "all")
    if first_off and hasattr(layers[0], "input_grad"):
        layers[0].input_grad = False
    for i in range(len(ops) - 1):
        if ops[i + 1].kind != "relu":
            continue
        nxt = ops[i + 2].kind if i + 2 < len(ops) else ""
        if swap and nxt == "maxpool":
            continue  # handled below: this ReLU moves after the pool
        if fuse and ops[i].kind in ("conv", "dense") and hasattr(layers[i], "relu"):
            layers[i].relu = True
            layers[i + 1] = Layer()
    if swap:
        for i in range(len(ops) - 1):
            if ops[i].kind == "relu" and ops[i + 1].kind == "maxpool":
                layers[i], layers[i + 1] = layers[i + 1], layers[i]
    net.layers = layers
    return net


def _one_step_state(net, x, y) -> tuple[float, list[np.ndarray]]:
    from tinyconv.losses import softmax_cross_entropy

    loss, grad = softmax_cross_entropy(net.forward(x, training=True), y)
    net.backward(grad)
    return loss, [g.copy() for _, g in net.grad_list()]


def agreement(text: str, variant: str) -> float:
    """Largest relative gradient difference between ``variant`` and the plain network after one step."""
    x, y = _nets.random_batch(text, _nets.TRAIN_BATCH, seed=1)
    base_loss, base = _one_step_state(_nets.ours_network(text), x, y)
    loss, grads = _one_step_state(build_variant(text, variant), x, y)
    worst = abs(loss - base_loss) / max(abs(base_loss), 1e-30)
    for a, b in zip(base, grads):
        worst = max(worst, float(np.max(np.abs(a - b)) / max(np.max(np.abs(a)), 1e-30)))
    return worst


def compare(name: str, repeats: int = 5, min_steps: int = 20) -> list[str]:
    """Interleaved timing of every variant of ``name``'s training step (1 process)."""
    text = _nets.REFERENCE[name][0]
    x, y = _nets.random_batch(text, _nets.TRAIN_BATCH, seed=1)
    runs, diffs = {}, {}
    for variant in VARIANTS:
        diffs[variant] = agreement(text, variant)
        runs[variant] = _nets.ours_train_step(build_variant(text, variant), x, y)
    for step in runs.values():
        _timing.warm_up(step, 3, 0.2)
    times = _timing.interleaved(runs, min_steps, repeats)
    base = _timing.rates(times["plain"], min_steps * _nets.TRAIN_BATCH).median
    lines = [f"{name} training step variants (batch {_nets.TRAIN_BATCH}, {repeats} x {min_steps} "
             "steps interleaved; same weights):",
             f"  {'variant':<22}{'img/s':>9}{'[min-max]':>20}{'vs plain':>10}{'grad diff':>11}"]
    for variant in VARIANTS:
        r = _timing.rates(times[variant], min_steps * _nets.TRAIN_BATCH)
        lines.append(f"  {variant:<22}{r.median:>9,.0f}{f'[{r.low:,.0f}-{r.high:,.0f}]':>20}"
                     f"{r.median / base:>10.2f}{diffs[variant]:>11.1e}")
    return lines
