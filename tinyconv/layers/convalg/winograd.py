"""The Winograd passes of a 3 x 3, stride-1 convolution: F(2x2, 3x3) or F(4x4, 3x3).

:class:`tinyconv.layers.conv.Conv` calls :func:`forward` and :func:`backward`
when its algorithm is one of the two :data:`VARIANTS`; the kernels and the
algebra are in :mod:`tinyconv.layers.convalg.winograd_f2` (2 x 2 outputs per tile,
hand-unrolled) and :mod:`tinyconv.layers.convalg.winograd_f4` (4 x 4 outputs).

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

from tinyconv.layers.convalg import winograd_f2 as kw
from tinyconv.layers.convalg import winograd_f4_unrolled as kw4u
from tinyconv.layers.convalg import winograd_f4 as kw4
from tinyconv.layers.kernels_act import column_sum
from tinyconv.layers.convalg.im2col import crop_nhwc, pad_nhwc

#: Target size of one chunk's largest transform buffer, in bytes.
CHUNK_BYTES = 1 << 20


class _F2:
    """F(2x2, 3x3): 16 planes, tiles of 4 stepping by 2."""

    name, count, step = "winograd", 16, 2
    tiles = staticmethod(kw.tiles)
    filter_transform = staticmethod(kw.filter_transform)
    filter_transform_adjoint = staticmethod(kw.filter_transform_adjoint)
    input = staticmethod(kw.input_transform)
    output = staticmethod(kw.output_transform)
    output_adjoint = staticmethod(kw.output_transform_adjoint)
    input_adjoint = staticmethod(kw.input_transform_adjoint)


class _F4:
    """F(4x4, 3x3): 36 planes, tiles of 6 stepping by 4.

    The straight-line kernels take the coefficients in the data's dtype; the
    two output-side ones hand tiles past the edge to the loop kernels, which
    take the matrix's non-zeros.
    """

    name, count, step = "winograd4", 36, 4
    tiles = staticmethod(kw4.tiles)
    filter_transform = staticmethod(kw4.filter_transform)
    filter_transform_adjoint = staticmethod(kw4.filter_transform_adjoint)
    _cache: dict = {}

    @classmethod
    def _nz(cls, which: str, dtype):
        """The non-zeros of one matrix, for the loop kernels of edge tiles."""
        key = (which, np.dtype(dtype).str)
        if key not in cls._cache:
            p = {"AT": kw4.AT, "A": kw4.AT.T}[which]
            cls._cache[key] = kw4.nonzeros(p, dtype)
        return cls._cache[key]

    @classmethod
    def _k(cls, dtype):
        """The unrolled kernels' coefficients in ``dtype``."""
        key = ("k", np.dtype(dtype).str)
        if key not in cls._cache:
            cls._cache[key] = np.array(kw4u.CONSTANTS, dtype=dtype)
        return cls._cache[key]

    @classmethod
    def input(cls, xp, th, tw, v):
        kw4u.input_transform(xp, cls._k(v.dtype), th, tw, v)

    @classmethod
    def output(cls, m, b, relu, th, tw, y):
        kw4u.output_transform(m, cls._k(m.dtype), *cls._nz("AT", m.dtype), b, relu, th, tw, y)

    @classmethod
    def output_adjoint(cls, dy, th, tw, dm):
        kw4u.output_transform_adjoint(dy, cls._k(dm.dtype), *cls._nz("A", dm.dtype), th, tw, dm)

    @classmethod
    def input_adjoint(cls, dv, th, tw, gxp):
        kw4u.input_transform_adjoint(dv, cls._k(gxp.dtype), th, tw, gxp)


#: The Winograd algorithms by name.
VARIANTS = {"winograd": _F2, "winograd4": _F4}


@dataclass
class Saved:
    """What a training forward keeps for its backward."""

    variant: type            # _F2 or _F4
    v: np.ndarray            # (planes, n * th * tw, c): transformed input tiles
    u: np.ndarray            # (planes, c, f): transformed filters
    pads: tuple[int, int, int, int]  # the padding used, with the extra row/column
    th: int
    tw: int
    x_shape: tuple[int, ...]
    xp_shape: tuple[int, ...]


def planes(buf: dict, key: str, tiles: int, channels: int, dtype,
           count: int = 16) -> np.ndarray:
    """A ``(count, tiles, channels)`` transform buffer, reused from ``buf`` when it fits."""
    a = buf.get(key)
    if a is None or a.shape != (count, tiles, channels) or a.dtype != dtype:
        a = kw.plane_buffer(tiles, channels, dtype, count)
        buf[key] = a
    return a


def chunk_images(tiles_per_image: int, channels: int, itemsize: int, n: int,
                 count: int = 16) -> int:
    """Images per chunk: as many as keep ``count * tiles * channels`` values near CHUNK_BYTES."""
    per_image = count * tiles_per_image * channels * itemsize
    return int(min(n, max(1, CHUNK_BYTES // per_image)))


def forward(x: np.ndarray, w: np.ndarray, b: np.ndarray, pads: tuple[int, int, int, int],
            relu: bool, buf: dict, training: bool,
            algorithm: str = "winograd") -> tuple[np.ndarray, Saved | None]:
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
    algorithm : {"winograd", "winograd4"}
        F(2x2, 3x3) or F(4x4, 3x3).
    """
    var = VARIANTS[algorithm]
    n, h, wd, c = x.shape
    f = w.shape[3]
    top, bottom, left, right = pads
    oh, ow = h + top + bottom - 2, wd + left + right - 2
    th, tw = var.tiles(oh, ow)
    # Tiles step by s over an input of s * tiles + 2: up to s - 1 more zero
    # rows or columns at the end when the output size is not a multiple of s.
    s = var.step
    pads = (top, bottom + s * th - oh, left, right + s * tw - ow)
    xp = pad_nhwc(x, pads, buf.get("xp"))
    if training and xp is not x:
        buf["xp"] = xp
    per = th * tw
    count = var.count
    nb = chunk_images(per, max(c, f), x.dtype.itemsize, n, count)
    u = var.filter_transform(w)
    v_all = planes(buf, "v", n * per, c, x.dtype, count) if training else None
    v_chunk = None if training else planes(buf, "v", nb * per, c, x.dtype, count)
    m = planes(buf, "m", nb * per, f, x.dtype, count)
    y = np.empty((n, oh, ow, f), dtype=x.dtype)
    for b0 in range(0, n, nb):
        b1 = min(n, b0 + nb)
        k = (b1 - b0) * per
        v = v_all[:, b0 * per:b1 * per] if training else v_chunk[:, :k]
        var.input(xp[b0:b1], th, tw, v)
        np.matmul(v, u, out=m[:, :k])
        var.output(m[:, :k], b, relu, th, tw, y[b0:b1])
    if not training:
        return y, None
    return y, Saved(var, v_all, u, pads, th, tw, x.shape, xp.shape)


def backward(saved: Saved, g: np.ndarray, input_grad: bool,
             buf: dict) -> tuple[np.ndarray | None, np.ndarray, np.ndarray]:
    """Input, weight and bias gradients from the output gradient ``g (n, oh, ow, f)``.

    The input gradient is None when ``input_grad`` is False. Every product is
    the exact adjoint of the forward's (see :mod:`tinyconv.layers.convalg.winograd_f2`).
    """
    var, v, u, th, tw = saved.variant, saved.v, saved.u, saved.th, saved.tw
    count, c, f = u.shape
    g = np.ascontiguousarray(g)
    n = g.shape[0]
    per = th * tw
    nb = chunk_images(per, max(c, f), g.dtype.itemsize, n, count)
    dm = planes(buf, "m", nb * per, f, g.dtype, count)
    du = np.zeros((count, c, f), dtype=g.dtype)
    part = np.empty_like(du)
    gxp = None
    if input_grad:
        dv = planes(buf, "dv", nb * per, c, g.dtype, count)
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
        var.output_adjoint(g[b0:b1], th, tw, dm[:, :k])
        np.matmul(v[:, b0 * per:b1 * per].transpose(0, 2, 1), dm[:, :k], out=part)
        du += part
        if input_grad:
            np.matmul(dm[:, :k], ut, out=dv[:, :k])
            var.input_adjoint(dv[:, :k], th, tw, gxp[b0:b1])
    gw = var.filter_transform_adjoint(du)
    gb = column_sum(g.reshape(-1, f))
    if not input_grad:
        return None, gw, gb
    h, wd = saved.x_shape[1], saved.x_shape[2]
    return crop_nhwc(gxp, saved.pads, h, wd), gw, gb
