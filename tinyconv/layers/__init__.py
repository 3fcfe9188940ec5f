"""The layers of the engine, and :func:`build`, which makes one from an Op.

One module per layer family; the contract every layer keeps is in
:mod:`tinyconv.layers.base`. Fast kernels are module-level functions in the
``kernels_*`` modules; their slow loop references are in
:mod:`tinyconv.layers.reference`.

Beyond the contract, a few layers offer optional hooks (all off by default,
so a network built by :func:`build` follows the contract exactly):

* ``input_grad`` (conv, dense): set False on a first layer to skip its input
  gradient; ``backward`` then returns None.
* ``relu=True`` (conv, depthwise, dense constructors), or ``relu=True`` in
  one call of their ``forward``: ReLU fused into the bias pass. The network
  does the latter for a layer followed by a ReLU Op, and hands the output to
  the ReLU layer's ``adopt`` (which keeps it as its mask), so both layers stay
  as they are for any other caller.
* ``masked=True`` (their ``backward``): the upstream gradient already carries
  the fused ReLU's mask; ``relu_mask=True`` (max-pool ``backward``) applies the
  mask of a ReLU just before the pool while routing the gradient.
* ``hold_mask`` (dropout): reuse the last mask, for gradient checks.
* ``arity`` (:class:`Add`, :class:`Stack`): layers of several inputs, whose
  ``backward`` returns one gradient per input (:mod:`tinyconv.layers.merge`).
* ``kink_state()`` (ReLU, max pool, fused-ReLU layers): the sign mask or the
  max-pool winners of the last training forward, so the gradient checker can
  tell when a finite-difference step crosses a kink.

Training forwards reuse scratch buffers (padded input, column matrices)
between calls; inference forwards allocate and keep nothing. No layer
modifies its input, and none may have its output modified in place by the
caller (ReLU keeps its output as the mask).
"""

from __future__ import annotations

from typing import Callable

import numpy as np

from tinyconv.arch import Op
from tinyconv.layers.activation import ReLU
from tinyconv.layers.base import Layer
from tinyconv.layers.conv import Conv
from tinyconv.layers.dense import Dense
from tinyconv.layers.depthwise import Depthwise
from tinyconv.layers.dropout import Dropout
from tinyconv.layers.merge import Add, Stack
from tinyconv.layers.norm import BatchNorm
from tinyconv.layers.pool import AvgPool, GlobalAvgPool, MaxPool
from tinyconv.layers.reshape import Flatten

__all__ = ["Layer", "Conv", "Depthwise", "MaxPool", "AvgPool", "GlobalAvgPool", "Dense",
           "ReLU", "Flatten", "Dropout", "BatchNorm", "Add", "Stack", "build", "BUILDERS",
           "KINDS"]


def _conv(op: Op, rng: np.random.Generator, dtype) -> Layer:
    return Conv(op.in_shape[2], op.filters, op.kernel, op.stride, op.pads, rng=rng, dtype=dtype)


def _dwconv(op: Op, rng: np.random.Generator, dtype) -> Layer:
    return Depthwise(op.in_shape[2], op.kernel, op.stride, op.pads, rng=rng, dtype=dtype)


def _dense(op: Op, rng: np.random.Generator, dtype) -> Layer:
    return Dense(op.in_shape[0], op.units, rng=rng, dtype=dtype)


#: the engine stage's table: per op kind, ``builder(op, rng, dtype) -> Layer``
BUILDERS: dict[str, Callable[[Op, np.random.Generator, np.dtype], Layer]] = {
    "conv": _conv,
    "dwconv": _dwconv,
    "maxpool": lambda op, rng, dtype: MaxPool(op.size),
    "avgpool": lambda op, rng, dtype: AvgPool(op.size),
    "gap": lambda op, rng, dtype: GlobalAvgPool(),
    "flatten": lambda op, rng, dtype: Flatten(),
    "dense": _dense,
    "relu": lambda op, rng, dtype: ReLU(),
    "bn": lambda op, rng, dtype: BatchNorm(op.in_shape[-1], dtype=dtype),
    "dropout": lambda op, rng, dtype: Dropout(op.rate, rng=rng),
    "add": lambda op, rng, dtype: Add(),
}
#: the built-in op kinds (a kind registered later is in :data:`BUILDERS` only)
KINDS = tuple(BUILDERS)


def build(op: Op, rng: np.random.Generator, dtype=np.float32) -> Layer:
    """Make the layer for one Op of :func:`tinyconv.arch.expand`.

    Parameters
    ----------
    op : Op
    rng : numpy.random.Generator
        Draws the initial weights, and later the dropout masks (the layer keeps it).
    dtype : numpy dtype
        ``np.float32`` (training) or ``np.float64`` (checks).

    Returns
    -------
    Layer
        With ``name == op.name``; made by the kind's entry of :data:`BUILDERS`.
    """
    dtype = np.dtype(dtype)
    if dtype not in (np.float32, np.float64):
        raise ValueError(f"layer dtype must be float32 or float64, got {dtype}")
    builder = BUILDERS.get(op.kind)
    if builder is None:
        raise ValueError(f"op {op.name!r}: unknown kind {op.kind!r}; expected one of "
                         f"{', '.join(BUILDERS)}")
    layer = builder(op, rng, dtype)
    layer.name = op.name
    return layer
