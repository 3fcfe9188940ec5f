"""Dense (fully connected) layer."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer
from tinyconv.layers.init import he_normal
from tinyconv.layers.kernels_act import add_bias_, bias_relu_, column_sum, relu_backward


class Dense(Layer):
    """``y = x @ w + b`` with ``w (n_in, n_out)``, ``b (n_out,)``.

    Parameters
    ----------
    n_in, n_out : int
    rng : numpy.random.Generator
        Draws ``w`` from ``N(0, 2 / n_in)``; ``b`` is zero.
    dtype : numpy dtype
    relu : bool
        Apply ReLU fused with the bias (off when built from an Op).

    Attributes
    ----------
    input_grad : bool
        When False, ``backward`` skips the input gradient and returns None.
    """

    kind = "dense"

    def __init__(self, n_in: int, n_out: int, *, rng: np.random.Generator,
                 dtype=np.float32, relu: bool = False):
        super().__init__()
        self.n_in, self.n_out, self.relu = n_in, n_out, relu
        self.input_grad = True
        self.params["w"] = he_normal(rng, (n_in, n_out), n_in, dtype)
        self.params["b"] = np.zeros(n_out, dtype=dtype)
        self._x: np.ndarray | None = None
        self._y: np.ndarray | None = None

    def forward(self, x: np.ndarray, training: bool = False,
                relu: bool | None = None) -> np.ndarray:
        """Output ``(n, n_out)``; ``relu`` (default ``self.relu``) fuses a ReLU into the bias pass."""
        relu = self.relu if relu is None else relu
        if x.ndim != 2 or x.shape[1] != self.n_in:
            raise ValueError(f"{self.name}: expected input (n, {self.n_in}), got shape {x.shape}")
        y = x @ self.params["w"]  # (n, n_out)
        if relu:
            bias_relu_(y, self.params["b"])
        else:
            add_bias_(y, self.params["b"])
        if training:
            self._x = x
            self._y = y if relu else None
        return y

    def backward(self, grad_out: np.ndarray, masked: bool = False) -> np.ndarray | None:
        """Input gradient (None when ``input_grad`` is False); sets ``grads``.

        ``masked``: ``grad_out`` is already zero where a fused ReLU output was not positive.
        """
        if self._y is not None and not masked:
            grad_out = relu_backward(grad_out, self._y)
        self.grads["w"] = self._x.T @ grad_out
        self.grads["b"] = column_sum(grad_out)
        if not self.input_grad:
            return None
        return grad_out @ self.params["w"].T

    def kink_state(self) -> np.ndarray | None:
        """With the fused ReLU, where the last training output was positive (for gradient checks)."""
        return None if not self.relu or self._y is None else self._y > 0
