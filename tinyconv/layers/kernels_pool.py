"""Pooling kernels: max pooling with argmax bookkeeping, average pooling.

Windows are ``s x s`` with stride ``s``; rows and columns past the last whole
window are dropped (floor), and get zero gradient.
"""

from __future__ import annotations

import numpy as np
from numba import njit


def maxpool_forward(x: np.ndarray, s: int) -> tuple[np.ndarray, np.ndarray]:
    """Max over ``s x s`` windows.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
    s : int

    Returns
    -------
    y : ndarray, shape (n, h // s, w // s, c)
    arg : ndarray of int32, shape (n, h // s, w // s, c)
        Index ``i * s + j`` of the maximum inside each window (the first one on ties).
    """
    n, h, w, c = x.shape
    y = np.empty((n, h // s, w // s, c), dtype=x.dtype)
    arg = np.empty(y.shape, dtype=np.int32)
    _maxpool_forward_kernel(np.ascontiguousarray(x), s, y, arg)
    return y, arg


def maxpool_backward(grad_out: np.ndarray, arg: np.ndarray, s: int,
                     x_shape: tuple[int, int, int, int],
                     y: np.ndarray | None = None) -> np.ndarray:
    """Route each output gradient to the input pixel that held the maximum.

    Parameters
    ----------
    grad_out, arg : ndarray, shape (n, h // s, w // s, c)
    s : int
    x_shape : (n, h, w, c)
    y : ndarray, shape of grad_out, optional
        The pooled output. When given, a window whose maximum is not positive
        passes no gradient: the ReLU mask of a ReLU before the pool, applied in
        the same pass (``relu`` then ``max`` commute, and the ReLU gradient of
        the winner is 0 exactly when the maximum is not positive).

    Returns
    -------
    ndarray, shape x_shape
    """
    gx = np.empty(x_shape, dtype=grad_out.dtype)
    g = np.ascontiguousarray(grad_out)
    masked = y is not None
    yy = np.ascontiguousarray(y) if masked else g
    n, h, w, c = x_shape
    if s == 2 and h == 2 * g.shape[1] and w == 2 * g.shape[2]:
        _maxpool2_backward(g, arg, yy, masked, gx)
    else:
        _maxpool_backward_kernel(g, arg, s, yy, masked, gx)
    return gx


def avgpool_forward(x: np.ndarray, s: int) -> np.ndarray:
    """Mean over ``s x s`` windows: ``(n, h, w, c) -> (n, h // s, w // s, c)``."""
    n, h, w, c = x.shape
    y = np.empty((n, h // s, w // s, c), dtype=x.dtype)
    _avgpool_forward_kernel(np.ascontiguousarray(x), s, y)
    return y


def avgpool_backward(grad_out: np.ndarray, s: int,
                     x_shape: tuple[int, int, int, int]) -> np.ndarray:
    """Spread each output gradient evenly, ``1 / s**2``, over its window."""
    gx = np.empty(x_shape, dtype=grad_out.dtype)
    _avgpool_backward_kernel(np.ascontiguousarray(grad_out), s, gx)
    return gx


# The kernels walk each window with the channel axis innermost, which is
# contiguous in NHWC; windows never overlap (stride = size).


@njit(cache=True)
def _maxpool_forward_kernel(x, s, y, arg):
    n, oh, ow, c = y.shape
    if s == 2:
        _maxpool2_forward(x, y, arg)
        return
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    y[b, oy, ox, ch] = x[b, oy * s, ox * s, ch]
                    arg[b, oy, ox, ch] = 0
                for i in range(s):
                    for j in range(s):
                        if i == 0 and j == 0:
                            continue
                        at = i * s + j
                        for ch in range(c):
                            v = x[b, oy * s + i, ox * s + j, ch]
                            # A NaN wins, so that it propagates like numpy's max.
                            if v > y[b, oy, ox, ch] or v != v:
                                y[b, oy, ox, ch] = v
                                arg[b, oy, ox, ch] = at


@njit(cache=True)
def _maxpool2_forward(x, y, arg):
    """The 2 x 2 case unrolled: four reads per output, in the generic kernel's order."""
    n, oh, ow, c = y.shape
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    m, at = x[b, 2 * oy, 2 * ox, ch], 0
                    v = x[b, 2 * oy, 2 * ox + 1, ch]
                    if v > m or v != v:
                        m, at = v, 1
                    v = x[b, 2 * oy + 1, 2 * ox, ch]
                    if v > m or v != v:
                        m, at = v, 2
                    v = x[b, 2 * oy + 1, 2 * ox + 1, ch]
                    if v > m or v != v:
                        m, at = v, 3
                    y[b, oy, ox, ch] = m
                    arg[b, oy, ox, ch] = at


# The backward kernels write the input gradient in memory order (input row,
# then pixel, then channel) with a branch-free select in the channel loop, which
# LLVM vectorises; walking the outputs instead (four scattered stores per
# value) measured 3-4x slower at the reference networks' shapes.


@njit(cache=True)
def _maxpool2_backward(g, arg, y, masked, gx):
    """The 2 x 2 case (even sizes); ``masked`` drops windows with ``y <= 0``."""
    n, oh, ow, c = g.shape
    for b in range(n):
        for oy in range(oh):
            for i in range(2):
                for ox in range(ow):
                    for j in range(2):
                        at = 2 * i + j
                        for ch in range(c):
                            v = g[b, oy, ox, ch]
                            if masked and not y[b, oy, ox, ch] > 0:
                                v = 0.0
                            gx[b, 2 * oy + i, 2 * ox + j, ch] = v if arg[b, oy, ox, ch] == at else 0.0


@njit(cache=True)
def _maxpool_backward_kernel(g, arg, s, y, masked, gx):
    """Any ``s``, any size; rows and columns past the last whole window get zero."""
    n, oh, ow, c = g.shape
    h, w = gx.shape[1], gx.shape[2]
    for b in range(n):
        for oy in range(oh):
            for i in range(s):
                for ox in range(ow):
                    for j in range(s):
                        at = i * s + j
                        for ch in range(c):
                            v = g[b, oy, ox, ch]
                            if masked and not y[b, oy, ox, ch] > 0:
                                v = 0.0
                            gx[b, oy * s + i, ox * s + j, ch] = v if arg[b, oy, ox, ch] == at else 0.0
                for xx in range(ow * s, w):
                    gx[b, oy * s + i, xx, :] = 0.0
        for yy in range(oh * s, h):
            gx[b, yy, :, :] = 0.0


@njit(cache=True)
def _avgpool_forward_kernel(x, s, y):
    n, oh, ow, c = y.shape
    scale = 1.0 / (s * s)
    acc = np.empty(c, dtype=np.float64)
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                acc[:] = 0.0
                for i in range(s):
                    for j in range(s):
                        for ch in range(c):
                            acc[ch] += x[b, oy * s + i, ox * s + j, ch]
                for ch in range(c):
                    y[b, oy, ox, ch] = acc[ch] * scale


@njit(cache=True)
def _avgpool_backward_kernel(g, s, gx):
    gx[:] = 0
    n, oh, ow, c = g.shape
    scale = 1.0 / (s * s)
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for i in range(s):
                    for j in range(s):
                        for ch in range(c):
                            gx[b, oy * s + i, ox * s + j, ch] = g[b, oy, ox, ch] * scale
