"""Pooling layers: max and average over ``s x s`` windows (stride s), global average."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer
from tinyconv.layers.kernels_pool import (avgpool_backward, avgpool_forward,
                                          maxpool_backward, maxpool_forward)


class MaxPool(Layer):
    """Max over ``s x s`` windows, stride ``s``; output ``(n, h // s, w // s, c)``.

    Forward (training) keeps the int32 index of each window's maximum; the
    gradient goes to that pixel only (the first maximum on ties).
    """

    kind = "maxpool"

    def __init__(self, size: int):
        super().__init__()
        if size < 1:
            raise ValueError(f"pool size must be at least 1, got {size}")
        self.size = size
        self._arg: np.ndarray | None = None
        self._x_shape: tuple[int, ...] | None = None
        self._y: np.ndarray | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        y, arg = maxpool_forward(x, self.size)
        if training:
            self._arg, self._x_shape, self._y = arg, x.shape, y
        return y

    def backward(self, grad_out: np.ndarray, relu_mask: bool = False) -> np.ndarray:
        """Input gradient; ``relu_mask`` also applies the mask of a ReLU just before the pool."""
        return maxpool_backward(grad_out, self._arg, self.size, self._x_shape,
                                self._y if relu_mask else None)

    def kink_state(self) -> np.ndarray | None:
        """Which pixel won each window in the last training forward (for gradient checks)."""
        return None if self._arg is None else self._arg.copy()


class AvgPool(Layer):
    """Mean over ``s x s`` windows, stride ``s``; output ``(n, h // s, w // s, c)``."""

    kind = "avgpool"

    def __init__(self, size: int):
        super().__init__()
        if size < 1:
            raise ValueError(f"pool size must be at least 1, got {size}")
        self.size = size
        self._x_shape: tuple[int, ...] | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        if training:
            self._x_shape = x.shape
        return avgpool_forward(x, self.size)

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        return avgpool_backward(grad_out, self.size, self._x_shape)


class GlobalAvgPool(Layer):
    """Mean over the spatial axes: ``(n, h, w, c) -> (n, c)``."""

    kind = "gap"

    def __init__(self):
        super().__init__()
        self._x_shape: tuple[int, ...] | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        if training:
            self._x_shape = x.shape
        n, h, w, c = x.shape
        # ones (h*w,) @ (n, h*w, c): a batched BLAS product, several times faster
        # than mean over the two middle axes.
        ones = np.full(h * w, 1.0 / (h * w), dtype=x.dtype)
        return ones @ np.ascontiguousarray(x).reshape(n, h * w, c)

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        n, h, w, c = self._x_shape
        gx = np.empty(self._x_shape, dtype=grad_out.dtype)
        gx[...] = (grad_out * (1.0 / (h * w))).astype(grad_out.dtype)[:, None, None, :]
        return gx
