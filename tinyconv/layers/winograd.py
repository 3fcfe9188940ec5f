"""The Winograd F(2x2, 3x3) passes of a 3 x 3, stride-1 convolution.

:class:`tinyconv.layers.conv.Conv` calls :func:`forward` and :func:`backward`
when its algorithm is Winograd; the kernels and the algebra are in
:mod:`tinyconv.layers.kernels_wino`.

The batch is processed in chunks of whole images, so that the transformed
tiles and products of one chunk (about :data:`CHUNK_BYTES`) stay in cache
between the transform kernels and the BLAS products that read them: measured
1.1-1.25x faster per layer than one pass over the batch (32 -> 64 channels,
16 x 16 maps, batch 64). Training keeps the transformed input tiles of the
whole batch for the weight gradient; everything else is per chunk.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tinyconv.layers import kernels_wino as kw
from tinyconv.layers.kernels_act import column_sum
from tinyconv.layers.kernels_conv import crop_nhwc, pad_nhwc

#: Target size of one chunk's largest transform buffer, in bytes.
CHUNK_BYTES = 1 << 20


@dataclass
class Saved:
    """What a training forward keeps for its backward."""

    v: np.ndarray            # (16, n * th * tw, c): transformed input tiles
    u: np.ndarray            # (16, c, f): transformed filters
    pads: tuple[int, int, int, int]  # the padding used, with the extra row/column
    th: int
    tw: int
    x_shape: tuple[int, ...]
    xp_shape: tuple[int, ...]


def planes(buf: dict, key: str, tiles: int, channels: int, dtype) -> np.ndarray:
    """A ``(16, tiles, channels)`` transform buffer, reused from ``buf`` when it fits."""
    a = buf.get(key)
    if a is None or a.shape != (16, tiles, channels) or a.dtype != dtype:
        a = kw.plane_buffer(tiles, channels, dtype)
        buf[key] = a
    return a


def chunk_images(tiles_per_image: int, channels: int, itemsize: int, n: int) -> int:
    """Images per chunk: as many as keep ``16 * tiles * channels`` values near CHUNK_BYTES."""
    per_image = 16 * tiles_per_image * channels * itemsize
    return int(min(n, max(1, CHUNK_BYTES // per_image)))


def forward(x: np.ndarray, w: np.ndarray, b: np.ndarray, pads: tuple[int, int, int, int],
            relu: bool, buf: dict, training: bool) -> tuple[np.ndarray, Saved | None]:
    """Output ``(n, oh, ow, f)`` of the convolution (bias, optional ReLU) and, in training, its Saved.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
    w : ndarray, shape (3, 3, c, f)
    b : ndarray, shape (f,)
    pads : (top, bottom, left, right)
        The layer's zero padding.
    relu : bool
    buf : dict
        Scratch buffers to reuse (the layer's, in training; a fresh dict otherwise).
    training : bool
        Keep what :func:`backward` needs.
    """
    n, h, wd, c = x.shape
    f = w.shape[3]
    top, bottom, left, right = pads
    oh, ow = h + top + bottom - 2, wd + left + right - 2
    th, tw = kw.tiles(oh, ow)
    # Tiles step by 2 over an input of 2 * tiles + 2: one more zero row or
    # column at the end when the output size is odd.
    pads = (top, bottom + 2 * th - oh, left, right + 2 * tw - ow)
    xp = pad_nhwc(x, pads, buf.get("xp"))
    if training and xp is not x:
        buf["xp"] = xp
    per = th * tw
    nb = chunk_images(per, max(c, f), x.dtype.itemsize, n)
    u = kw.filter_transform(w)
    v_all = planes(buf, "v", n * per, c, x.dtype) if training else None
    v_chunk = None if training else planes(buf, "v", nb * per, c, x.dtype)
    m = planes(buf, "m", nb * per, f, x.dtype)
    y = np.empty((n, oh, ow, f), dtype=x.dtype)
    for b0 in range(0, n, nb):
        b1 = min(n, b0 + nb)
        k = (b1 - b0) * per
        v = v_all[:, b0 * per:b1 * per] if training else v_chunk[:, :k]
        kw.input_transform(xp[b0:b1], th, tw, v)
        np.matmul(v, u, out=m[:, :k])
        kw.output_transform(m[:, :k], b, relu, th, tw, y[b0:b1])
    if not training:
        return y, None
    return y, Saved(v_all, u, pads, th, tw, x.shape, xp.shape)


def backward(saved: Saved, g: np.ndarray, input_grad: bool,
             buf: dict) -> tuple[np.ndarray | None, np.ndarray, np.ndarray]:
    """Input, weight and bias gradients from the output gradient ``g (n, oh, ow, f)``.

    The input gradient is None when ``input_grad`` is False. Every product is
    the exact adjoint of the forward's (see :mod:`tinyconv.layers.kernels_wino`).
    """
    v, u, th, tw = saved.v, saved.u, saved.th, saved.tw
    c, f = u.shape[1], u.shape[2]
    g = np.ascontiguousarray(g)
    n = g.shape[0]
    per = th * tw
    nb = chunk_images(per, max(c, f), g.dtype.itemsize, n)
    dm = planes(buf, "m", nb * per, f, g.dtype)
    du = np.zeros((16, c, f), dtype=g.dtype)
    part = np.empty_like(du)
    gxp = None
    if input_grad:
        dv = planes(buf, "dv", nb * per, c, g.dtype)
        ut = u.transpose(0, 2, 1)
        # The padded gradient is scratch only when it is cropped (a copy) before return.
        padded = any(saved.pads)
        gxp = buf.get("gxp") if padded else None
        if gxp is None or gxp.shape != saved.xp_shape or gxp.dtype != g.dtype:
            gxp = np.empty(saved.xp_shape, dtype=g.dtype)
        if padded:
            buf["gxp"] = gxp
    for b0 in range(0, n, nb):
        b1 = min(n, b0 + nb)
        k = (b1 - b0) * per
        kw.output_transform_adjoint(g[b0:b1], th, tw, dm[:, :k])
        np.matmul(v[:, b0 * per:b1 * per].transpose(0, 2, 1), dm[:, :k], out=part)
        du += part
        if input_grad:
            np.matmul(dm[:, :k], ut, out=dv[:, :k])
            kw.input_transform_adjoint(dv[:, :k], th, tw, gxp[b0:b1])
    gw = kw.filter_transform_adjoint(du)
    gb = column_sum(g.reshape(-1, f))
    if not input_grad:
        return None, gw, gb
    h, wd = saved.x_shape[1], saved.x_shape[2]
    return crop_nhwc(gxp, saved.pads, h, wd), gw, gb
