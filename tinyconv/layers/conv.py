"""Standard convolution layer: im2col + one BLAS product, or Winograd F(2x2 or 4x4, 3x3)."""

from __future__ import annotations

import numpy as np

from tinyconv.layers.base import Layer
from tinyconv.layers.init import he_normal
from tinyconv.layers.kernels_act import add_bias_, bias_relu_, column_sum, relu_backward
from tinyconv.layers.convalg.im2col import (chunk_rows, col2im, conv_out_size, crop_nhwc,
                                           im2col, pad_nhwc)
from tinyconv.layers.convalg import winograd

#: the values of ``Conv.algorithm``: "winograd" is Winograd F(2x2, 3x3) and "winograd4"
#: F(4x4, 3x3) (:mod:`tinyconv.layers.convalg`); "auto" asks :func:`pick_algorithm`
ALGORITHMS = ("auto", "im2col", "winograd", "winograd4")


def pick_algorithm(kernel: int, stride: int, c_in: int, filters: int, training: bool,
                   size: int = 8) -> str:
    """The fastest algorithm for a layer's shape, as measured on a 2-core x86 machine.

    ``size`` is the smaller side of the output map. Winograd needs a 3 x 3
    kernel of stride 1. Measured per layer at batch 64 (forward + backward in
    training, forward of 256 images in inference; 4 x 4 to 32 x 32 maps, 8 to
    64 channels each way, the three algorithms interleaved): from 16 input
    channels Winograd is 1.2-2.2x faster than im2col, and in training
    F(4x4, 3x3) beats F(2x2, 3x3) by 5-25% on maps of 8 x 8 or more (on 4 x 4,
    a single 6 x 6 tile is mostly padding, and F(2x2) wins); in inference
    F(2x2) is as fast and rounds less. With 8 input channels the three are
    within 10% of each other and im2col wins on the small maps most layers
    of that width see; with 3, im2col wins 1.5-2x; fewer than 8 filters make
    products too narrow for Winograd's BLAS calls.
    """
    if kernel != 3 or stride != 1 or filters < 8 or c_in < 16:
        return "im2col"
    return "winograd4" if training and size >= 8 else "winograd"


class Conv(Layer):
    """``k x k`` cross-correlation with ``f`` filters, stride 1 or 2, explicit pads.

    Parameters
    ----------
    c_in, filters, kernel, stride : int
    pads : (top, bottom, left, right)
        Zero padding; ``(0, 0, 0, 0)`` is valid padding.
    rng : numpy.random.Generator
        Draws the He-initialised weights ``w (kh, kw, c_in, f)``; ``b (f,)`` is zero.
    dtype : numpy dtype
    relu : bool
        Apply ReLU to the output in the same pass as the bias (fused); off when
        built from an Op, where ReLU is its own layer.

    Attributes
    ----------
    algorithm : {"auto", "im2col", "winograd", "winograd4"}
        How forward and backward compute. ``"auto"`` (the default) takes
        :func:`pick_algorithm` of the shape in each forward; the others force
        im2col, Winograd F(2x2, 3x3) or F(4x4, 3x3) (Winograd only for 3 x 3,
        stride 1). All three give the same values up to float rounding on
        finite inputs (the tests compare them; an infinite input can give NaN
        under Winograd, whose transforms subtract). Change it between steps,
        not between a forward and its backward.
    input_grad : bool
        When False, ``backward`` skips the input gradient (im2col: the
        column-gradient product and col2im; Winograd: the input-tile products
        and their scatter) and returns None: for a first layer, whose input
        gradient nobody reads. True by default, as the layer contract says.

    Notes
    -----
    Output size per axis ``(size + before + after - k) // s + 1``. A training
    forward keeps, for the weight gradient, the column matrix
    ``(n * oh * ow, k * k * c_in)`` (im2col) or the transformed input tiles
    (Winograd, in a :class:`tinyconv.layers.convalg.winograd.Saved`).
    """

    kind = "conv"

    def __init__(self, c_in: int, filters: int, kernel: int, stride: int = 1,
                 pads: tuple[int, int, int, int] = (0, 0, 0, 0), *,
                 rng: np.random.Generator, dtype=np.float32, relu: bool = False):
        super().__init__()
        self.c_in, self.filters, self.kernel, self.stride = c_in, filters, kernel, stride
        self.pads = tuple(pads)
        self.relu = relu
        self.input_grad = True
        self.algorithm = "auto"
        self.params["w"] = he_normal(rng, (kernel, kernel, c_in, filters),
                                     kernel * kernel * c_in, dtype)
        self.params["b"] = np.zeros(filters, dtype=dtype)
        self._cols: np.ndarray | None = None
        self._x_shape: tuple[int, ...] | None = None
        self._y: np.ndarray | None = None
        self._wino: winograd.Saved | None = None
        self._buffers: dict[str, np.ndarray] = {}

    def forward(self, x: np.ndarray, training: bool = False,
                relu: bool | None = None) -> np.ndarray:
        """Output ``(n, oh, ow, f)``; ``relu`` (default ``self.relu``) fuses a ReLU into the bias pass."""
        w, b = self.params["w"], self.params["b"]
        relu = self.relu if relu is None else relu
        if x.ndim != 4 or x.shape[3] != self.c_in:
            raise ValueError(f"{self.name}: expected input (n, h, w, {self.c_in}), "
                             f"got shape {x.shape}")
        algorithm = self.resolve_algorithm(x.shape[1], x.shape[2], training)
        if algorithm in ("winograd", "winograd4"):
            return self._forward_winograd(x, training, relu, algorithm)
        n, h, wd, _ = x.shape
        k, s, f = self.kernel, self.stride, self.filters
        # Scratch buffers are reused only in training (inference keeps nothing).
        buf = self._buffers if training else {}
        xp = pad_nhwc(x, self.pads, buf.get("xp"))
        oh, ow = conv_out_size(xp.shape[1], k, s), conv_out_size(xp.shape[2], k, s)
        w2 = w.reshape(k * k * self.c_in, f)
        step = chunk_rows(oh * ow, k * k * self.c_in, x.itemsize, n)
        if (k == 1 and s == 1) or step >= n:
            cols = im2col(xp, k, k, s, buf.get("cols"))  # (n*oh*ow, k*k*c_in)
            y = cols @ w2  # (n*oh*ow, f)
            (bias_relu_ if relu else add_bias_)(y, b)
        else:
            cols, y = self._product_in_chunks(xp, w2, b, relu, step, buf, training)
        if training:
            if xp is not x:
                buf["xp"] = xp
            if not (k == 1 and s == 1):  # else cols is a view of xp, not a buffer
                buf["cols"] = cols.base
        y = y.reshape(n, oh, ow, f)
        if training:
            self._cols, self._x_shape, self._xp_shape = cols, x.shape, xp.shape
            self._y = y if relu else None
            self._wino = None
        return y

    def _product_in_chunks(self, xp: np.ndarray, w2: np.ndarray, b: np.ndarray, relu: bool,
                           step: int, buf: dict, training: bool):
        """im2col, product and bias ``step`` images at a time, each chunk's columns
        still in cache when the product reads them; returns (cols, y (n*oh*ow, f)).

        Training fills the whole batch's column matrix (the weight gradient reads
        it); inference reuses one chunk's.
        """
        n, k, s = xp.shape[0], self.kernel, self.stride
        oh, ow = conv_out_size(xp.shape[1], k, s), conv_out_size(xp.shape[2], k, s)
        rows = oh * ow
        shape = (n if training else step, oh, ow, k, k, self.c_in)
        kept = buf.get("cols")
        whole = kept if kept is not None and kept.shape == shape and kept.dtype == xp.dtype \
            else np.empty(shape, dtype=xp.dtype)
        y = np.empty((n * rows, w2.shape[1]), dtype=np.result_type(xp, w2))
        for i in range(0, n, step):
            m = min(step, n - i)
            part = whole[i:i + m] if training else whole[:m]
            cols = im2col(xp[i:i + m], k, k, s, part)    # (m*oh*ow, k*k*c_in), in ``part``
            out = y[i * rows:(i + m) * rows]
            np.matmul(cols, w2, out=out)
            (bias_relu_ if relu else add_bias_)(out, b)
        return whole.reshape(-1, k * k * self.c_in), y

    def resolve_algorithm(self, h: int, w: int, training: bool) -> str:
        """The algorithm a forward on ``h x w`` inputs runs: ``self.algorithm``, or for
        ``"auto"`` :func:`pick_algorithm` of the layer's shape and output size."""
        algorithm = self.algorithm
        if algorithm not in ALGORITHMS:
            raise ValueError(f"{self.name}: algorithm must be one of {ALGORITHMS}, "
                             f"got {algorithm!r}")
        if algorithm != "auto":
            return algorithm
        top, bottom, left, right = self.pads
        size = min(conv_out_size(h + top + bottom, self.kernel, self.stride),
                   conv_out_size(w + left + right, self.kernel, self.stride))
        return pick_algorithm(self.kernel, self.stride, self.c_in, self.filters, training, size)

    def _forward_winograd(self, x: np.ndarray, training: bool, relu: bool,
                          algorithm: str) -> np.ndarray:
        if self.kernel != 3 or self.stride != 1:
            raise ValueError(f"{self.name}: the winograd algorithm needs a 3 x 3 kernel of "
                             f"stride 1, not {self.kernel} x {self.kernel} stride {self.stride}")
        buf = self._buffers if training else {}
        y, saved = winograd.forward(x, self.params["w"], self.params["b"], self.pads, relu,
                                    buf, training, algorithm)
        if training:
            self._cols = None  # the backward reads ``saved``; free the im2col columns
            self._y = y if relu else None
            self._wino = saved
        return y

    def backward(self, grad_out: np.ndarray, masked: bool = False) -> np.ndarray | None:
        """Input gradient (None when ``input_grad`` is False); sets ``grads``.

        ``masked``: after a fused-ReLU forward, ``grad_out`` is already zero
        wherever the output was not positive (as a max pool reading it makes
        it), so the ReLU mask pass is skipped.
        """
        w = self.params["w"]
        k, s, f, c = self.kernel, self.stride, self.filters, self.c_in
        if self._y is not None and not masked:
            grad_out = relu_backward(grad_out, self._y)
        if self._wino is not None:
            return self._backward_winograd(grad_out)
        g = np.ascontiguousarray(grad_out).reshape(-1, f)  # (n*oh*ow, f)
        self.grads["w"] = (self._cols.T @ g).reshape(w.shape)
        self.grads["b"] = column_sum(g)
        if not self.input_grad:
            return None
        buf = self._buffers
        # A 1 x 1, stride-1 kernel returns the column gradient itself as grad_x,
        # so it gets a fresh array; otherwise col2im copies it and it is scratch.
        reuse = not (k == 1 and s == 1)
        n, h, wd, _ = self._x_shape
        padded = any(self.pads)
        rows = g.shape[0] // n                                   # oh * ow
        step = chunk_rows(rows, k * k * c, g.itemsize, n) if reuse else n
        gcols = buf.get("gcols") if reuse else None
        if gcols is None or gcols.shape != (step * rows, k * k * c) or gcols.dtype != g.dtype:
            gcols = np.empty((step * rows, k * k * c), dtype=g.dtype)
            if reuse:
                buf["gcols"] = gcols
        w2t = w.reshape(k * k * c, f).T                          # (f, k*k*c_in)
        if step >= n:
            np.matmul(g, w2t, out=gcols)  # (n*oh*ow, k*k*c_in)
            # The padded gradient is scratch only when it is cropped (a copy) before return.
            gxp = col2im(gcols, self._xp_shape, k, k, s, buf.get("gxp") if padded else None)
        else:  # the column gradient of ``step`` images at a time, scattered while in cache
            gxp = buf.get("gxp") if padded else None
            if gxp is None or gxp.shape != self._xp_shape or gxp.dtype != g.dtype:
                gxp = np.empty(self._xp_shape, dtype=g.dtype)
            for i in range(0, n, step):
                m = min(step, n - i)
                part = gcols[:m * rows]                          # (m*oh*ow, k*k*c_in)
                np.matmul(g[i * rows:(i + m) * rows], w2t, out=part)
                col2im(part, (m, *self._xp_shape[1:]), k, k, s, gxp[i:i + m])
        if padded:
            buf["gxp"] = gxp
        return crop_nhwc(gxp, self.pads, h, wd)

    def _backward_winograd(self, grad_out: np.ndarray) -> np.ndarray | None:
        gx, self.grads["w"], self.grads["b"] = winograd.backward(
            self._wino, grad_out, self.input_grad, self._buffers)
        return gx

    def kink_state(self) -> np.ndarray | None:
        """With the fused ReLU, where the last training output was positive (for gradient checks)."""
        return None if not self.relu or self._y is None else self._y > 0
