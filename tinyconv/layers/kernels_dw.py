"""Depthwise convolution kernels: one ``kh x kw`` filter per channel, direct loops.

A depthwise convolution does ``k * k`` multiply-adds per output value and has no
reduction over channels, so a matrix product gains nothing; the direct loop
keeps the channel axis innermost (contiguous in NHWC).
"""

from __future__ import annotations

import numpy as np
from numba import njit

from tinyconv.layers.convalg.im2col import conv_out_size, padded_shape


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


# Stride 1 on the unpadded input. One output row ``(ow * c)`` is a contiguous
# run in NHWC, and so is the input row it reads for kernel tap ``(i, j)``,
# shifted by ``(j - left) * c``: each tap is one long vectorised loop over the
# row against the weights tiled along it, and taps that fall in the padding are
# skipped (no padded copy is made). Measured 2-4x faster than the pixel loops
# above, whose channel loops are only ``c`` long.


def tile_taps(w: np.ndarray, ow: int) -> np.ndarray:
    """``w (kh, kw, c)`` repeated along a row: ``(kh, kw, ow * c)``."""
    kh, kw, c = w.shape
    return np.ascontiguousarray(np.broadcast_to(w[:, :, None, :], (kh, kw, ow, c))).reshape(
        kh, kw, ow * c)


def dw1_out_shape(x_shape: tuple[int, int, int, int], kernel: int,
                  pads: tuple[int, int, int, int]) -> tuple[int, int, int, int]:
    """Output shape of a stride-1 depthwise convolution of ``x_shape`` padded by ``pads``."""
    n, hp, wp, c = padded_shape(x_shape, pads)
    return (n, conv_out_size(hp, kernel, 1), conv_out_size(wp, kernel, 1), c)


def dw1_forward(x: np.ndarray, w: np.ndarray, b: np.ndarray,
                pads: tuple[int, int, int, int], relu: bool = False) -> np.ndarray:
    """Stride-1 depthwise cross-correlation of ``x`` zero-padded by ``pads`` (never copied).

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
        The unpadded input.
    w : ndarray, shape (k, k, c)
    b : ndarray, shape (c,)
    pads : (top, bottom, left, right)
    relu : bool
        Apply ``max(., 0)`` to each output row as it is finished (fused).

    Returns
    -------
    ndarray, shape (n, h + top + bottom - k + 1, w + left + right - k + 1, c)
        The same values as :func:`dw_forward` of the padded input, summed in
        the same order (bias, then the taps row by row).
    """
    n, oh, ow, c = dw1_out_shape(x.shape, w.shape[0], pads)
    x = np.ascontiguousarray(x)
    y = np.empty((n, oh, ow, c), dtype=x.dtype)
    wt = tile_taps(w.astype(x.dtype, copy=False), ow)
    bt = np.tile(b.astype(x.dtype, copy=False), ow)
    _dw1_forward_kernel(x.reshape(n, x.shape[1], -1), c, wt, bt, pads[0], pads[2], relu,
                        y.reshape(n, oh, ow * c))
    return y


def dw1_backward(grad_out: np.ndarray, x: np.ndarray, w: np.ndarray,
                 pads: tuple[int, int, int, int],
                 y: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gradients of :func:`dw1_forward`, in one sweep over the output rows.

    Parameters
    ----------
    grad_out : ndarray, shape (n, oh, ow, c)
    x : ndarray, shape (n, h, w, c)
        The unpadded input of the forward pass.
    w : ndarray, shape (k, k, c)
    pads : (top, bottom, left, right)
    y : ndarray, shape of grad_out, optional
        The output of a forward with the ReLU fused: where it is not positive
        the gradient is dropped (the ReLU backward, applied in the same sweep).

    Returns
    -------
    grad_x : ndarray, shape (n, h, w, c)
    grad_w : ndarray, shape (k, k, c)
        Summed per image and row in the input dtype, then in float64.
    grad_b : ndarray, shape (c,)
    """
    g = np.ascontiguousarray(grad_out)
    x = np.ascontiguousarray(x)
    n, oh, ow, c = g.shape
    _, h, wd, _ = x.shape
    kh, kw, _ = w.shape
    masked = y is not None
    ym = np.ascontiguousarray(y) if masked else g
    gx = np.empty(x.shape, dtype=g.dtype)
    gw = np.empty((kh, kw, ow * c), dtype=np.float64)
    gb = np.empty(ow * c, dtype=np.float64)
    _dw1_backward_kernel(g.reshape(n, oh, ow * c), ym.reshape(n, oh, ow * c), masked,
                         x.reshape(n, h, wd * c), c, tile_taps(w.astype(g.dtype, copy=False), ow),
                         pads[0], pads[2], gx.reshape(n, h, wd * c), gw, gb)
    gw = gw.reshape(kh, kw, ow, c).sum(axis=2)
    gb = gb.reshape(ow, c).sum(axis=0)
    return gx, gw.astype(w.dtype), gb.astype(w.dtype)


@njit(cache=True)
def _tap_range(j, left, c, w, ow):
    """Row offsets ``[lo, hi)`` of the outputs whose tap ``j`` reads an input column, and the shift."""
    shift = (j - left) * c
    lo = max(0, left - j)
    hi = min(ow, w + left - j)
    return lo * c, max(hi, lo) * c, shift


@njit(cache=True)
def _dw1_forward_kernel(x, c, wt, bt, top, left, relu, y):
    """``y (n, oh, ow*c)`` from ``x (n, h, w*c)``, taps ``wt (kh, kw, ow*c)``, bias ``bt (ow*c,)``."""
    n, oh, span = y.shape
    h, w = x.shape[1], x.shape[2] // c
    kh, kw = wt.shape[0], wt.shape[1]
    ow = span // c
    for b in range(n):
        for oy in range(oh):
            out = y[b, oy]
            for q in range(span):
                out[q] = bt[q]
            for i in range(kh):
                r = oy + i - top
                if r < 0 or r >= h:
                    continue
                for j in range(kw):
                    lo, hi, shift = _tap_range(j, left, c, w, ow)
                    # Slices indexed from 0: no negative-index fix-up in the loop.
                    o, src, taps = out[lo:hi], x[b, r, lo + shift:hi + shift], wt[i, j, lo:hi]
                    for q in range(hi - lo):
                        o[q] += src[q] * taps[q]
            if relu:
                for q in range(span):
                    v = out[q]
                    out[q] = 0.0 if v <= 0 else v


@njit(cache=True)
def _dw1_backward_kernel(g, y, masked, x, c, wt, top, left, gx, gw, gb):
    """Input gradient ``gx (n, h, w*c)`` and per-lane sums ``gw (kh, kw, ow*c)``, ``gb (ow*c,)``.

    Per image, the weight and bias terms are summed in the input dtype over the
    output rows (``oh`` terms per lane), then added to the float64 totals.
    """
    n, oh, span = g.shape
    h, w = x.shape[1], x.shape[2] // c
    kh, kw = wt.shape[0], wt.shape[1]
    ow = span // c
    gm = np.empty(span, dtype=g.dtype)
    part = np.empty((kh, kw, span), dtype=g.dtype)
    bpart = np.empty(span, dtype=g.dtype)
    gw[:] = 0.0
    gb[:] = 0.0
    for b in range(n):
        gx[b] = 0.0
        part[:] = 0.0
        bpart[:] = 0.0
        for oy in range(oh):
            for q in range(span):
                v = g[b, oy, q]
                if masked and not y[b, oy, q] > 0:
                    v = 0.0
                gm[q] = v
                bpart[q] += v
            for i in range(kh):
                r = oy + i - top
                if r < 0 or r >= h:
                    continue
                for j in range(kw):
                    lo, hi, shift = _tap_range(j, left, c, w, ow)
                    # Slices indexed from 0: no negative-index fix-up in the loops.
                    src, dst = x[b, r, lo + shift:hi + shift], gx[b, r, lo + shift:hi + shift]
                    gr, taps, acc = gm[lo:hi], wt[i, j, lo:hi], part[i, j, lo:hi]
                    for q in range(hi - lo):
                        v = gr[q]
                        dst[q] += v * taps[q]
                        acc[q] += v * src[q]
        for i in range(kh):
            for j in range(kw):
                for q in range(span):
                    gw[i, j, q] += part[i, j, q]
        for q in range(span):
            gb[q] += bpart[q]
