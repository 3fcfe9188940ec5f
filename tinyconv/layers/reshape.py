"""Flatten layer."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer


class Flatten(Layer):
    """``(n, h, w, c) -> (n, h * w * c)`` in C order (channels fastest)."""

    kind = "flatten"

    def __init__(self):
        super().__init__()
        self._x_shape: tuple[int, ...] | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        if training:
            self._x_shape = x.shape
        return np.ascontiguousarray(x).reshape(x.shape[0], -1)

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        return grad_out.reshape(self._x_shape)
