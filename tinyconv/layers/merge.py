"""Layers that join tensors: the residual addition and the channel stacking.

Both take several inputs, so beyond the single-input contract of
:mod:`tinyconv.layers.base` they say how many they read (``arity``) and give
one gradient per input:

* :class:`Add` (``y = x + skip``) closes a residual block: ``forward(x,
  training, skip=...)`` (or ``forward_all((x, skip))``); ``backward(g)``
  returns ``(g_x, g_skip)``, both equal to ``g``, as the derivative of a sum
  is one for each term (the network adds ``g_skip`` to the gradient of the
  block's input when its backward reaches it);
* :class:`Stack` concatenates maps along the channel axis (the colour planes of
  a stacked input such as ``rgb+hsv``): ``forward_all(xs)``; ``backward(g)``
  returns the gradient of each input, the matching channel slice of ``g``.

The arithmetic is in :func:`add_forward`, :func:`stack_forward` and
:func:`stack_backward`; :mod:`tinyconv.layers.reference` holds their loop twins.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from tinyconv.layers.base import Layer


def add_forward(x: np.ndarray, skip: np.ndarray) -> np.ndarray:
    """``x + skip`` into a new array (shapes must be equal: no broadcasting)."""
    if x.shape != skip.shape:
        raise ValueError(f"residual addition of shapes {x.shape} and {skip.shape}: a block's "
                         "output must have its input's shape")
    return np.add(x, skip)


def stack_forward(xs: Sequence[np.ndarray]) -> np.ndarray:
    """Maps ``(n, h, w, c_i)`` stacked along the channels into ``(n, h, w, sum c_i)``.

    One output array is allocated and each input copied into its channel slice.
    """
    if not xs:
        raise ValueError("stacking needs at least one map")
    first = xs[0]
    for x in xs[1:]:
        if x.shape[:-1] != first.shape[:-1]:
            raise ValueError(f"stacking maps of shapes {first.shape} and {x.shape}: all but "
                             "the channel axis must be equal")
    dtype = np.result_type(*xs)
    out = np.empty(first.shape[:-1] + (sum(x.shape[-1] for x in xs),), dtype=dtype)
    at = 0
    for x in xs:
        c = x.shape[-1]
        out[..., at:at + c] = x
        at += c
    return out


def stack_backward(grad_out: np.ndarray, channels: Sequence[int]) -> tuple[np.ndarray, ...]:
    """The gradient of each stacked input: its channel slice of ``grad_out`` (a copy)."""
    if sum(channels) != grad_out.shape[-1]:
        raise ValueError(f"a gradient of {grad_out.shape[-1]} channels cannot be split into "
                         f"{list(channels)}")
    bounds = np.cumsum([0] + list(channels))
    return tuple(np.ascontiguousarray(grad_out[..., a:b]) for a, b in zip(bounds, bounds[1:]))


class Add(Layer):
    """The residual addition ``y = x + skip`` (no parameters, no ReLU)."""

    kind = "add"
    arity = 2

    def forward(self, x: np.ndarray, training: bool = False,
                skip: np.ndarray | None = None) -> np.ndarray:
        if skip is None:
            raise TypeError(f"{self.name}: the residual addition needs skip= (the block's input)")
        return add_forward(x, skip)

    def forward_all(self, xs: Sequence[np.ndarray], training: bool = False) -> np.ndarray:
        """:meth:`forward` of ``(x, skip)``: the form every joining layer shares."""
        x, skip = xs
        return self.forward(x, training, skip=skip)

    def backward(self, grad_out: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """``(g_x, g_skip)``: the upstream gradient for both terms (shared, not to be
        changed in place, like every layer's output)."""
        return grad_out, grad_out


class Stack(Layer):
    """Maps stacked along the channel axis (no parameters)."""

    kind = "stack"

    def __init__(self, channels: Sequence[int]):
        super().__init__()
        self.channels = tuple(int(c) for c in channels)
        self.arity = len(self.channels)

    def forward_all(self, xs: Sequence[np.ndarray], training: bool = False) -> np.ndarray:
        got = tuple(x.shape[-1] for x in xs)
        if got != self.channels:
            raise ValueError(f"{self.name}: expected maps of {list(self.channels)} channels, "
                             f"got {list(got)}")
        return stack_forward(xs)

    def backward(self, grad_out: np.ndarray) -> tuple[np.ndarray, ...]:
        return stack_backward(grad_out, self.channels)
