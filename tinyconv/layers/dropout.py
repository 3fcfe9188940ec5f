"""Inverted dropout, active in training only."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer


class Dropout(Layer):
    """Zero each activation with probability ``rate`` and scale the rest by ``1 / (1 - rate)``.

    Parameters
    ----------
    rate : float
        In ``[0, 1)``.
    rng : numpy.random.Generator
        Draws the masks (one per training forward).

    Notes
    -----
    Inverted scaling keeps the expected output equal to the input, so
    evaluation is the identity. Setting ``hold_mask = True`` makes training
    forwards reuse the last mask while the input shape stays the same, which
    makes the layer a fixed linear map (what a gradient check needs).
    """

    kind = "dropout"

    def __init__(self, rate: float, *, rng: np.random.Generator):
        super().__init__()
        if not 0.0 <= rate < 1.0:
            raise ValueError(f"dropout rate must be in [0, 1), got {rate}")
        self.rate = float(rate)
        self.rng = rng
        self.hold_mask = False
        self._mask: np.ndarray | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        if not training:
            return x
        held = self._mask
        if not (self.hold_mask and held is not None and held.shape == x.shape
                and held.dtype == x.dtype):
            # Drawn in float32 whatever the layer's dtype: half the work, and one
            # seed gives the same masks to float32 and float64 layers.
            keep = self.rng.random(x.shape, dtype=np.float32) >= np.float32(self.rate)
            self._mask = keep.astype(x.dtype) * x.dtype.type(1.0 / (1.0 - self.rate))
        return x * self._mask

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        return grad_out * self._mask
