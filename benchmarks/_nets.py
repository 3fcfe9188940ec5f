"""The reference networks of the speed protocol, as our engine and as the peer.

Both sides are built from the same ``tinyconv.arch.expand`` operations, so
they have the same layers, shapes and ReLU placement. Ours is NHWC; the peer
(torch, optional) is NCHW, as its convolutions expect. One training step on
either side is forward + softmax cross-entropy + backward + SGD with momentum;
one inference step is a forward pass only.
"""

from __future__ import annotations

import inspect
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tinyconv.arch import Op, expand, parse

#: name -> (text form, parameters, forward MACs per image) of the reference
#: networks; the two numbers are the table of the speed protocol
#: (shared/BENCHMARKS.md), which the cost model must reproduce.
REFERENCE = {
    "N1": ("32x32rgb", 30_730, 30_720),
    "N2": ("32x32rgb/c8k3-p2-c16k3-p2", 11_642, 526_336),
    "N3": ("32x32rgb/c32k3-p2-c64k3-p2-d64", 282_250, 5_866_112),
    "N4": ("32x32rgb/c16k3-p2-dw3-c32k1-p2-gap", 1_482, 610_624),
    # A camera device's network (issue 19), beyond the protocol's table: its two
    # numbers were counted by hand with the rules of expand_counts.
    "N5": ("96x96gray/c8k3s2-dw3-c16k1-p2-dw3-c32k1-p2-dw3-c64k1-gap", 4_090, 1_341_568),
}
N_CLASSES = 10
TRAIN_BATCH = 64
INFER_BATCH = 256
LR = 0.01
MOMENTUM = 0.9


@dataclass(frozen=True)
class Counts:
    """Parameters and forward MACs per image of one network, and where they came from."""

    params: int
    macs: int
    source: str          # "tinyconv.cost" or "expand" (counted here)
    expand_params: int   # the count made here from expand(), as a cross-check
    expand_macs: int


def expand_counts(ops: tuple[Op, ...]) -> tuple[int, int]:
    """Trained parameters and forward MACs per image, counted from the ops.

    Notes
    -----
    conv ``k k c_in f + f`` and ``h_out w_out k k c_in f``; depthwise
    ``k k c + c`` and ``h_out w_out k k c``; dense ``n_in n_out + n_out`` and
    ``n_in n_out``; batch norm ``2 c`` and no MACs (the rules of DEVELOPERS.md).
    """
    params = macs = 0
    for op in ops:
        if op.kind == "conv":
            c_in, (oh, ow, f), k = op.in_shape[2], op.out_shape, op.kernel
            params += k * k * c_in * f + f
            macs += oh * ow * k * k * c_in * f
        elif op.kind == "dwconv":
            (oh, ow, c), k = op.out_shape, op.kernel
            params += k * k * c + c
            macs += oh * ow * k * k * c
        elif op.kind == "dense":
            n_in, n_out = op.in_shape[0], op.out_shape[0]
            params += n_in * n_out + n_out
            macs += n_in * n_out
        elif op.kind == "bn":
            params += 2 * op.out_shape[-1]
    return params, macs


def counts(text: str, n_classes: int = N_CLASSES) -> Counts:
    """Parameters and MACs of ``text``: from ``tinyconv.cost`` when it exists, else counted here."""
    own_p, own_m = expand_counts(expand(parse(text), n_classes))
    try:
        from tinyconv.cost import cost_of
    except ImportError:
        return Counts(own_p, own_m, "expand", own_p, own_m)
    cost = cost_of(text, n_classes)
    return Counts(int(cost.params), int(cost.macs), "tinyconv.cost", own_p, own_m)


def relu_note(text: str) -> str:
    """Where a ReLU follows a depthwise convolution in the text form (the table has none there)."""
    ops = expand(parse(text), N_CLASSES)
    spots = [ops[i].name for i in range(len(ops) - 1)
             if ops[i].kind == "dwconv" and ops[i + 1].kind == "relu"]
    if not spots:
        return ""
    return (f"the text form puts a ReLU after {', '.join(spots)} where the table has none "
            "(no parameters or MACs change)")


def random_batch(text: str, n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Seeded random images ``(n, h, w, c)`` float32 and labels ``(n,)`` int64 for ``text``."""
    arch = parse(text)
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((n,) + arch.input.shape, dtype=np.float32)
    y = rng.integers(0, N_CLASSES, size=n, dtype=np.int64)
    return x, y


# ---------------------------------------------------------------- ours


def ours_network(text: str, seed: int = 0):
    """Our engine's network for ``text`` (float32, 10 classes)."""
    from tinyconv.network import Network

    return Network.from_arch(text, N_CLASSES, seed=seed, dtype=np.float32)


def ours_param_count(net) -> int:
    """Trained values held by our network."""
    return int(sum(a.size for _, a in net.param_list()))


def skips_input_grad(net) -> bool:
    """True when ``net.backward`` takes ``input_grad`` (so training can skip the images' gradient)."""
    return "input_grad" in inspect.signature(net.backward).parameters


def training_backward(net) -> Callable[[np.ndarray], object]:
    """``net.backward`` as training calls it: without the images' gradient when the engine allows.

    The peer does not compute that gradient either (its input needs none), so
    this is the like-for-like step.
    """
    if skips_input_grad(net):
        return lambda grad: net.backward(grad, input_grad=False)
    return net.backward


def ours_train_step(net, x: np.ndarray, y: np.ndarray) -> Callable[[], float]:
    """One training step of our engine on the fixed batch ``(x, y)``; returns the loss."""
    from tinyconv.losses import softmax_cross_entropy
    from tinyconv.optim import SGD

    opt = SGD(net.param_list(), momentum=MOMENTUM)
    backward = training_backward(net)
    try:  # the engine's own step (parts of a batch whose activations pass the cache)
        from tinyconv.train import micro_batch, train_step
    except ImportError:  # an engine before train_step: the same step written out
        train_step = None
    if train_step is not None:
        micro = micro_batch(net, len(x))
        return lambda: train_step(net, x, y, opt, LR, 0.0, micro)[0]

    def step() -> float:
        logits = net.forward(x, training=True)
        loss, grad = softmax_cross_entropy(logits, y)
        backward(grad)
        opt.update([g for _, g in net.grad_list()], LR)
        return loss

    return step


def ours_infer_step(net, x: np.ndarray) -> Callable[[], object]:
    """One inference forward pass of our engine on ``x``."""
    return lambda: net.forward(x, training=False)


# ---------------------------------------------------------------- the peer


def peer_available() -> bool:
    """True when torch can be imported."""
    try:
        import torch  # noqa: F401
    except ImportError:
        return False
    return True


def peer_model(text: str, seed: int = 0):
    """The same network in torch (NCHW): one module per op of ``expand``."""
    import torch
    from torch import nn

    class GlobalMean(nn.Module):
        """(n, c, h, w) -> (n, c): the mean over the map."""

        def forward(self, x):
            return x.mean(dim=(2, 3))

    torch.manual_seed(seed)
    mods: list = []
    for op in expand(parse(text), N_CLASSES):
        if op.kind in ("conv", "dwconv"):
            c_in = op.in_shape[2]
            top, bottom, left, right = op.pads
            groups = c_in if op.kind == "dwconv" else 1
            if top == bottom and left == right:
                pad = (top, left)
            else:  # asymmetric same padding: pad explicitly, extra pixel after
                mods.append(nn.ZeroPad2d((left, right, top, bottom)))
                pad = (0, 0)
            mods.append(nn.Conv2d(c_in, op.filters, op.kernel, stride=op.stride,
                                  padding=pad, groups=groups))
        elif op.kind == "relu":
            mods.append(nn.ReLU())
        elif op.kind == "maxpool":
            mods.append(nn.MaxPool2d(op.size, op.stride))
        elif op.kind == "avgpool":
            mods.append(nn.AvgPool2d(op.size, op.stride))
        elif op.kind == "gap":
            mods.append(GlobalMean())
        elif op.kind == "flatten":
            mods.append(nn.Flatten())
        elif op.kind == "dense":
            mods.append(nn.Linear(op.in_shape[0], op.out_shape[0]))
        elif op.kind == "bn":
            c = op.out_shape[-1]
            mods.append(nn.BatchNorm2d(c) if len(op.out_shape) == 3 else nn.BatchNorm1d(c))
        elif op.kind == "dropout":
            mods.append(nn.Dropout(op.rate))
        else:
            raise ValueError(f"op kind {op.kind!r} has no peer module; add it to peer_model")
    return nn.Sequential(*mods)


def peer_param_count(model) -> int:
    """Trained values held by the peer's network."""
    return int(sum(p.numel() for p in model.parameters()))


def to_peer(x: np.ndarray, y: np.ndarray | None = None):
    """NHWC float32 images (and labels) as torch NCHW tensors (a copy, contiguous)."""
    import torch

    xt = torch.from_numpy(np.ascontiguousarray(x.transpose(0, 3, 1, 2)))  # (n, c, h, w)
    return xt, (None if y is None else torch.from_numpy(y))


def peer_train_step(model, x: np.ndarray, y: np.ndarray) -> Callable[[], float]:
    """One peer training step (cross-entropy, SGD momentum) on the fixed batch."""
    import torch
    import torch.nn.functional as F

    xt, yt = to_peer(x, y)
    model.train()
    opt = torch.optim.SGD(model.parameters(), lr=LR, momentum=MOMENTUM)

    def step() -> float:
        opt.zero_grad()
        loss = F.cross_entropy(model(xt), yt)
        loss.backward()
        opt.step()
        return float(loss.detach())

    return step


def peer_infer_step(model, x: np.ndarray) -> Callable[[], object]:
    """One peer inference forward pass (no autograd bookkeeping)."""
    import torch

    xt, _ = to_peer(x)
    model.eval()

    def step():
        with torch.inference_mode():
            return model(xt)

    return step
