"""Depthwise convolution kernels: one ``kh x kw`` filter per channel, direct loops.

A depthwise convolution does ``k * k`` multiply-adds per output value and has no
reduction over channels, so a matrix product gains nothing; the direct loop
keeps the channel axis innermost (contiguous in NHWC).
"""

from __future__ import annotations

import numpy as np
from numba import njit


def dw_forward(xp: np.ndarray, w: np.ndarray, b: np.ndarray, stride: int) -> np.ndarray:
    """Depthwise cross-correlation of a padded input.

    Parameters
    ----------
    xp : ndarray, shape (n, hp, wp, c)
        The padded input.
    w : ndarray, shape (kh, kw, c)
    b : ndarray, shape (c,)
    stride : int

    Returns
    -------
    ndarray, shape (n, (hp - kh) // s + 1, (wp - kw) // s + 1, c)
    """
    n, hp, wp, c = xp.shape
    kh, kw, _ = w.shape
    oh, ow = (hp - kh) // stride + 1, (wp - kw) // stride + 1
    y = np.empty((n, oh, ow, c), dtype=xp.dtype)
    _dw_forward_kernel(np.ascontiguousarray(xp), np.ascontiguousarray(w), b, stride, y)
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
    _dw_backward_kernel(grad_out, np.ascontiguousarray(xp), np.ascontiguousarray(w), stride,
                        gxp, gw)
    gb = grad_out.sum(axis=(0, 1, 2), dtype=np.float64)
    return gxp, gw.astype(w.dtype), gb.astype(w.dtype)


@njit(cache=True)
def _dw_forward_kernel(xp, w, bias, s, y):
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


@njit(cache=True)
def _dw_backward_kernel(g, xp, w, s, gxp, gw):
    gxp[:] = 0
    gw[:] = 0
    n, oh, ow, c = g.shape
    kh, kw = w.shape[0], w.shape[1]
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for i in range(kh):
                    for j in range(kw):
                        for ch in range(c):
                            v = g[b, oy, ox, ch]
                            gw[i, j, ch] += v * xp[b, oy * s + i, ox * s + j, ch]
                            gxp[b, oy * s + i, ox * s + j, ch] += v * w[i, j, ch]
