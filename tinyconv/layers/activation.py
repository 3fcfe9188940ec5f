"""ReLU layer."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer
from tinyconv.layers.kernels_act import relu_backward, relu_forward


class ReLU(Layer):
    """``max(x, 0)``; the gradient at exactly 0 is taken as 0.

    Forward (training) keeps its output, whose sign is the mask backward needs;
    callers must not modify a layer's output in place.
    """

    kind = "relu"

    def __init__(self):
        super().__init__()
        self._y: np.ndarray | None = None

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        y = relu_forward(x)
        if training:
            self._y = y
        return y

    def adopt(self, y: np.ndarray, training: bool = False) -> np.ndarray:
        """Take ``y``, already rectified by the layer before (fused), as this layer's output.

        Keeps it as the mask in training, exactly as :meth:`forward` would
        have; returns ``y``.
        """
        if training:
            self._y = y
        return y

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        return relu_backward(grad_out, self._y)

    def kink_state(self) -> np.ndarray | None:
        """Where the last training input was positive (for gradient checks)."""
        return None if self._y is None else self._y > 0
