"""Depthwise convolution layer: one ``k x k`` filter per channel."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer
from tinyconv.layers.init import he_normal
from tinyconv.layers.kernels_act import relu_backward
from tinyconv.layers.convalg.im2col import crop_nhwc, pad_nhwc
from tinyconv.layers.kernels_dw import dw1_backward, dw1_forward, dw_backward, dw_forward


class Depthwise(Layer):
    """Depthwise cross-correlation, stride 1 or 2, explicit pads.

    Stride 1 runs the row kernels on the unpadded input (``dw1_forward``,
    ``dw1_backward``); other strides pad and run the pixel loops.

    Parameters
    ----------
    channels, kernel, stride : int
    pads : (top, bottom, left, right)
    rng : numpy.random.Generator
        Draws ``w (kh, kw, c)`` from ``N(0, 2 / (k * k))``; ``b (c,)`` is zero.
    dtype : numpy dtype
    relu : bool
        Apply ReLU to the output (off when built from an Op).
    """

    kind = "dwconv"

    def __init__(self, channels: int, kernel: int, stride: int = 1,
                 pads: tuple[int, int, int, int] = (0, 0, 0, 0), *,
                 rng: np.random.Generator, dtype=np.float32, relu: bool = False):
        super().__init__()
        self.channels, self.kernel, self.stride = channels, kernel, stride
        self.pads = tuple(pads)
        self.relu = relu
        self.params["w"] = he_normal(rng, (kernel, kernel, channels), kernel * kernel, dtype)
        self.params["b"] = np.zeros(channels, dtype=dtype)
        self._xp: np.ndarray | None = None
        self._x_shape: tuple[int, ...] | None = None
        self._y: np.ndarray | None = None

    def forward(self, x: np.ndarray, training: bool = False,
                relu: bool | None = None) -> np.ndarray:
        """Output ``(n, oh, ow, c)``; ``relu`` (default ``self.relu``) is fused into the kernel."""
        relu = self.relu if relu is None else relu
        if x.ndim != 4 or x.shape[3] != self.channels:
            raise ValueError(f"{self.name}: expected input (n, h, w, {self.channels}), "
                             f"got shape {x.shape}")
        if self.stride == 1:
            # Taps in the padding are skipped: the input itself is kept, not a padded copy.
            xp = x
            y = dw1_forward(x, self.params["w"], self.params["b"], self.pads, relu)
        else:
            xp = pad_nhwc(x, self.pads)
            y = dw_forward(xp, self.params["w"], self.params["b"], self.stride, relu)
        if training:
            self._xp, self._x_shape = xp, x.shape
            self._y = y if relu else None
        return y

    def backward(self, grad_out: np.ndarray, masked: bool = False) -> np.ndarray:
        """Input gradient; sets ``grads``.

        ``masked``: ``grad_out`` is already zero where a fused ReLU output was not positive.
        """
        relu_y = self._y if self._y is not None and not masked else None
        if self.stride == 1:  # the ReLU mask is applied inside the sweep
            gx, gw, gb = dw1_backward(grad_out, self._xp, self.params["w"], self.pads, relu_y)
            self.grads["w"], self.grads["b"] = gw, gb
            return gx
        if relu_y is not None:
            grad_out = relu_backward(grad_out, relu_y)
        gxp, gw, gb = dw_backward(grad_out, self._xp, self.params["w"], self.stride)
        self.grads["w"], self.grads["b"] = gw, gb
        _, h, w, _ = self._x_shape
        return crop_nhwc(gxp, self.pads, h, w)

    def kink_state(self) -> np.ndarray | None:
        """With the fused ReLU, where the last training output was positive (for gradient checks)."""
        return None if not self.relu or self._y is None else self._y > 0
