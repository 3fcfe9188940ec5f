"""Batch normalisation over the last (channel) axis."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer
from tinyconv.layers.kernels_act import column_sum


class BatchNorm(Layer):
    """Normalise each channel, then scale by ``gamma`` and shift by ``beta``.

    Parameters
    ----------
    channels : int
    dtype : numpy dtype
    momentum : float
        Running statistics update ``r = momentum * r + (1 - momentum) * batch``
        (0.9, common practice).
    eps : float
        Added to the variance (1e-5, common practice).

    Notes
    -----
    Training uses the batch statistics over every axis but the last (biased
    variance) and updates ``state["mean"]``, ``state["var"]`` (the running
    variance takes the unbiased batch variance); evaluation uses the running
    statistics. Input ``(n, h, w, c)`` or ``(n, c)``.
    """

    kind = "bn"

    def __init__(self, channels: int, *, dtype=np.float32, momentum: float = 0.9,
                 eps: float = 1e-5):
        super().__init__()
        self.channels, self.momentum, self.eps = channels, momentum, eps
        self.params["gamma"] = np.ones(channels, dtype=dtype)
        self.params["beta"] = np.zeros(channels, dtype=dtype)
        self.state["mean"] = np.zeros(channels, dtype=dtype)
        self.state["var"] = np.ones(channels, dtype=dtype)
        self._xhat: np.ndarray | None = None
        self._inv_std: np.ndarray | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        if x.shape[-1] != self.channels:
            raise ValueError(f"{self.name}: expected {self.channels} channels on the last "
                             f"axis, got shape {x.shape}")
        gamma, beta = self.params["gamma"], self.params["beta"]
        if not training:
            inv_std = 1.0 / np.sqrt(self.state["var"] + self.eps)
            scale = (gamma * inv_std).astype(x.dtype)
            return x * scale + (beta - self.state["mean"] * scale).astype(x.dtype)
        # Statistics over a (rows, c) view; column_sum is a BLAS matrix-vector product.
        rows = np.ascontiguousarray(x).reshape(-1, self.channels)
        count = rows.shape[0]
        mean = column_sum(rows) / count
        centred = rows - mean
        var = column_sum(centred * centred) / count
        inv_std = (1.0 / np.sqrt(var + self.eps)).astype(x.dtype)
        xhat = centred * inv_std
        m = self.momentum
        unbiased = var * (count / max(count - 1, 1))
        self.state["mean"][...] = m * self.state["mean"] + (1 - m) * mean
        self.state["var"][...] = m * self.state["var"] + (1 - m) * unbiased
        self._xhat, self._inv_std = xhat, inv_std
        xhat = xhat.reshape(x.shape)
        return xhat * gamma + beta

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        xhat, inv_std = self._xhat, self._inv_std  # xhat as (rows, c)
        g = np.ascontiguousarray(grad_out).reshape(xhat.shape)
        self.grads["beta"] = column_sum(g)
        self.grads["gamma"] = column_sum(g * xhat)
        # d/dx of gamma * (x - mean) / std with batch mean and variance:
        # inv_std * gamma * (g - mean(g) - xhat * mean(g * xhat)).
        count = g.shape[0]
        mean_g = self.grads["beta"] / count
        mean_gx = self.grads["gamma"] / count
        gx = (g - mean_g - xhat * mean_gx) * (self.params["gamma"] * inv_std)
        return gx.reshape(grad_out.shape)
