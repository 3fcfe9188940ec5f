"""Depthwise convolution kernels: one ``kh x kw`` filter per channel, direct loops.

A depthwise convolution does ``k * k`` multiply-adds per output value and has no
reduction over channels, so a matrix product gains nothing; the direct loop
keeps the channel axis innermost (contiguous in NHWC).
"""

from __future__ import annotations

import numpy as np
from numba import njit


def dw_forward(xp: np.ndarray, w: np.ndarray, b: np.ndarray, stride: int,
               relu: bool = False) -> np.ndarray:
    """Depthwise cross-correlation of a padded input.

    Parameters
    ----------
    xp : ndarray, shape (n, hp, wp, c)
        The padded input.
    w : ndarray, shape (kh, kw, c)
    b : ndarray, shape (c,)
    stride : int
    relu : bool
        Apply ``max(., 0)`` to each output as it is finished (fused).

    Returns
    -------
    ndarray, shape (n, (hp - kh) // s + 1, (wp - kw) // s + 1, c)
    """
    n, hp, wp, c = xp.shape
    kh, kw, _ = w.shape
    oh, ow = (hp - kh) // stride + 1, (wp - kw) // stride + 1
    y = np.empty((n, oh, ow, c), dtype=xp.dtype)
    _dw_forward_kernel(np.ascontiguousarray(xp), np.ascontiguousarray(w), b, stride, relu, y)
    return y


def dw_backward(grad_out: np.ndarray, xp: np.ndarray, w: np.ndarray,
                stride: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gradients of the depthwise convolution.

    Parameters
    ----------
    grad_out : ndarray, shape (n, oh, ow, c)
    xp : ndarray, shape (n, hp, wp, c)
        The padded input of the forward pass.
    w : ndarray, shape (kh, kw, c)

    Returns
    -------
    grad_xp : ndarray, shape (n, hp, wp, c)
        Gradient with respect to the padded input.
    grad_w : ndarray, shape (kh, kw, c)
    grad_b : ndarray, shape (c,)
    """
    grad_out = np.ascontiguousarray(grad_out)
    gxp = np.empty(xp.shape, dtype=grad_out.dtype)
    gw = np.empty(w.shape, dtype=np.float64)
    _dw_grad_input_kernel(grad_out, np.ascontiguousarray(w), stride, gxp)
    _dw_grad_weight_kernel(grad_out, np.ascontiguousarray(xp), stride,
                           np.empty(w.shape, dtype=grad_out.dtype), gw)
    gb = grad_out.sum(axis=(0, 1, 2), dtype=np.float64)
    return gxp, gw.astype(w.dtype), gb.astype(w.dtype)


@njit(cache=True)
def _dw_forward_kernel(xp, w, bias, s, relu, y):
    n, oh, ow, c = y.shape
    kh, kw = w.shape[0], w.shape[1]
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    y[b, oy, ox, ch] = bias[ch]
                for i in range(kh):
                    for j in range(kw):
                        for ch in range(c):
                            y[b, oy, ox, ch] += xp[b, oy * s + i, ox * s + j, ch] * w[i, j, ch]
                if relu:
                    for ch in range(c):
                        v = y[b, oy, ox, ch]
                        y[b, oy, ox, ch] = 0.0 if v <= 0 else v


# The backward pass is two sweeps, not one: a loop that writes both the
# input gradient and the weight gradient does not vectorise (measured several
# times slower than the two together).


@njit(cache=True)
def _dw_grad_input_kernel(g, w, s, gxp):
    """``gxp[b, oy*s+i, ox*s+j, ch] += g[b, oy, ox, ch] * w[i, j, ch]``."""
    gxp[:] = 0
    n, oh, ow, c = g.shape
    kh, kw = w.shape[0], w.shape[1]
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for i in range(kh):
                    for j in range(kw):
                        r, q = oy * s + i, ox * s + j
                        for ch in range(c):
                            gxp[b, r, q, ch] += g[b, oy, ox, ch] * w[i, j, ch]


@njit(cache=True)
def _dw_grad_weight_kernel(g, xp, s, part, gw):
    """``gw[i, j, ch] = sum over b, oy, ox of g[b, oy, ox, ch] * xp[b, oy*s+i, ox*s+j, ch]``.

    Summed per image in the input dtype into ``part`` (a few hundred terms;
    one type keeps the channel loop vectorised), then into the float64 ``gw``.
    """
    gw[:] = 0
    n, oh, ow, c = g.shape
    kh, kw = part.shape[0], part.shape[1]
    for b in range(n):
        part[:] = 0
        for oy in range(oh):
            for ox in range(ow):
                for i in range(kh):
                    for j in range(kw):
                        r, q = oy * s + i, ox * s + j
                        for ch in range(c):
                            part[i, j, ch] += g[b, oy, ox, ch] * xp[b, r, q, ch]
        for i in range(kh):
            for j in range(kw):
                for ch in range(c):
                    gw[i, j, ch] += part[i, j, ch]
