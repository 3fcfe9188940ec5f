"""Winograd F(4x4, 3x3) kernels: 4 x 4 outputs from 6 x 6 tiles, 36 products.

The same algorithm as :mod:`tinyconv.layers.convalg.winograd_f2`, with larger tiles:
36 multiplications per 4 x 4 block of outputs and channel pair instead of 144
(4x fewer multiply-adds than the direct convolution, against 2.25x for
F(2x2, 3x3)), at the price of larger transform coefficients and so of about
ten times the float32 rounding error (still near 1e-6 of the output scale).

Matrices of Lavin and Gray ("Fast Algorithms for Convolutional Neural
Networks", CVPR 2016, section 4.2; interpolation points 0, 1, -1, 2, -2 and
infinity). ``Y = A^T [(G g G^T) * (B^T d B)] A``.

The transforms are written once, for any matrix: a kernel applies ``P x P^T``
to every tile, rows then columns, visiting only the non-zero coefficients
(given as index and value arrays by :func:`nonzeros`) with the channel axis
innermost. Layouts as in winograd_f2: planes ``(36, n * th * tw, c)``,
element ``e = 6 * i + j``, tile ``t = (b * th + ty) * tw + tx``; tiles step
by 4 over an input of ``4 * tiles + 2``.

Training runs the straight-line versions of these kernels in
:mod:`tinyconv.layers.convalg.winograd_f4_unrolled` (printed by
``devtools/gen_winograd_f4.py``); the loop kernels here are their reference
in the tests and take the tiles that reach past the output edge.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from tinyconv.layers.convalg.winograd_f2 import filter_product, filter_product_adjoint

BT = np.array([[4, 0, -5, 0, 1, 0],
               [0, -4, -4, 1, 1, 0],
               [0, 4, -4, -1, 1, 0],
               [0, -2, -1, 2, 1, 0],
               [0, 2, -1, -2, 1, 0],
               [0, 4, 0, -5, 0, 1]], dtype=np.float64)
G = np.array([[1 / 4, 0, 0],
              [-1 / 6, -1 / 6, -1 / 6],
              [-1 / 6, 1 / 6, -1 / 6],
              [1 / 24, 1 / 12, 1 / 6],
              [1 / 24, -1 / 12, 1 / 6],
              [0, 0, 1]], dtype=np.float64)
AT = np.array([[1, 1, 1, 1, 1, 0],
               [0, 1, -1, 2, -2, 0],
               [0, 1, 1, 4, 4, 0],
               [0, 1, -1, 8, -8, 1]], dtype=np.float64)
# Both filter transforms in one product: GG[6 i + j, 3 a + b] = G[i, a] G[j, b].
GG = np.kron(G, G)

ALPHA = 6   # tile size
STEP = 4    # outputs per tile and axis


def tiles(oh: int, ow: int) -> tuple[int, int]:
    """Tiles per axis covering an ``oh x ow`` output: ``(ceil(oh / 4), ceil(ow / 4))``."""
    return (oh + 3) // 4, (ow + 3) // 4


def nonzeros(p: np.ndarray, dtype) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Row indices, column indices and values of the non-zero entries of ``p``."""
    rows, cols = np.nonzero(p)
    return rows.astype(np.int64), cols.astype(np.int64), p[rows, cols].astype(dtype)


def filter_transform(w: np.ndarray) -> np.ndarray:
    """``U = G w G^T`` per channel pair: ``w (3, 3, c, f) -> (36, c, f)``."""
    return filter_product(GG, w)


def filter_transform_adjoint(du: np.ndarray) -> np.ndarray:
    """``dw = G^T dU G``: ``(36, c, f) -> (3, 3, c, f)``."""
    return filter_product_adjoint(GG, du)


@njit(cache=True)
def _two_sided(d, pr, pc, pv, a_out, tmp, out):
    """``out[i, l, :] = sum_k,j P[i, k] d[k, j, :] P[l, j]`` for a tile ``d (a_in, a_in, c)``.

    ``P`` (``a_out x a_in``) is given by its non-zeros ``(pr, pc, pv)``;
    ``tmp (a_out, a_in, c)`` is scratch; ``out (a_out, a_out, c)`` is overwritten.
    """
    tmp[:] = 0.0
    out[:] = 0.0
    a_in, c = d.shape[1], d.shape[2]
    for z in range(pr.shape[0]):
        i, k, coef = pr[z], pc[z], pv[z]
        for j in range(a_in):
            for ch in range(c):
                tmp[i, j, ch] += coef * d[k, j, ch]
    for z in range(pr.shape[0]):
        l, j, coef = pr[z], pc[z], pv[z]
        for i in range(a_out):
            for ch in range(c):
                out[i, l, ch] += coef * tmp[i, j, ch]


@njit(cache=True)
def input_transform(xp, pr, pc, pv, th, tw, v):
    """``v[:, t, :] = B^T d B`` for each 6 x 6 tile of ``xp (n, hp, wp, c)`` (``P = B^T``)."""
    n, c = xp.shape[0], xp.shape[3]
    d = np.empty((ALPHA, ALPHA, c), dtype=v.dtype)
    tmp = np.empty((ALPHA, ALPHA, c), dtype=v.dtype)
    out = np.empty((ALPHA, ALPHA, c), dtype=v.dtype)
    for b in range(n):
        for ty in range(th):
            for tx in range(tw):
                t = (b * th + ty) * tw + tx
                r, q = STEP * ty, STEP * tx
                for i in range(ALPHA):
                    for j in range(ALPHA):
                        for ch in range(c):
                            d[i, j, ch] = xp[b, r + i, q + j, ch]
                _two_sided(d, pr, pc, pv, ALPHA, tmp, out)
                for i in range(ALPHA):
                    for j in range(ALPHA):
                        for ch in range(c):
                            v[ALPHA * i + j, t, ch] = out[i, j, ch]


@njit(cache=True)
def output_tile(m, pr, pc, pv, bias, relu, b, ty, tx, th, tw, y):
    """One tile of :func:`output_transform` (outputs past the edge of ``y`` dropped)."""
    oh, ow, f = y.shape[1], y.shape[2], y.shape[3]
    d = np.empty((ALPHA, ALPHA, f), dtype=m.dtype)
    tmp = np.empty((STEP, ALPHA, f), dtype=m.dtype)
    out = np.empty((STEP, STEP, f), dtype=m.dtype)
    t = (b * th + ty) * tw + tx
    for i in range(ALPHA):
        for j in range(ALPHA):
            for o in range(f):
                d[i, j, o] = m[ALPHA * i + j, t, o]
    _two_sided(d, pr, pc, pv, STEP, tmp, out)
    for i in range(min(STEP, oh - STEP * ty)):
        for j in range(min(STEP, ow - STEP * tx)):
            for o in range(f):
                u = out[i, j, o] + bias[o]
                y[b, STEP * ty + i, STEP * tx + j, o] = max(u, 0.0) if relu else u


@njit(cache=True)
def output_transform(m, pr, pc, pv, bias, relu, th, tw, y):
    """``y`` block ``= A^T m A + bias`` (ReLU if ``relu``) for ``y (n, oh, ow, f)`` (``P = A^T``).

    Outputs of a tile past ``oh`` or ``ow`` are dropped.
    """
    for b in range(y.shape[0]):
        for ty in range(th):
            for tx in range(tw):
                output_tile(m, pr, pc, pv, bias, relu, b, ty, tx, th, tw, y)


@njit(cache=True)
def output_adjoint_tile(dy, pr, pc, pv, b, ty, tx, th, tw, dm):
    """One tile of :func:`output_transform_adjoint` (zero past the edge of ``dy``)."""
    oh, ow, f = dy.shape[1], dy.shape[2], dy.shape[3]
    d = np.zeros((STEP, STEP, f), dtype=dm.dtype)
    tmp = np.empty((ALPHA, STEP, f), dtype=dm.dtype)
    out = np.empty((ALPHA, ALPHA, f), dtype=dm.dtype)
    t = (b * th + ty) * tw + tx
    for i in range(min(STEP, oh - STEP * ty)):
        for j in range(min(STEP, ow - STEP * tx)):
            for o in range(f):
                d[i, j, o] = dy[b, STEP * ty + i, STEP * tx + j, o]
    _two_sided(d, pr, pc, pv, ALPHA, tmp, out)
    for i in range(ALPHA):
        for j in range(ALPHA):
            for o in range(f):
                dm[ALPHA * i + j, t, o] = out[i, j, o]


@njit(cache=True)
def output_transform_adjoint(dy, pr, pc, pv, th, tw, dm):
    """``dm[:, t, :] = A dY A^T`` per 4 x 4 block of ``dy (n, oh, ow, f)`` (``P = A``, zero past the edge)."""
    for b in range(dy.shape[0]):
        for ty in range(th):
            for tx in range(tw):
                output_adjoint_tile(dy, pr, pc, pv, b, ty, tx, th, tw, dm)


@njit(cache=True)
def input_transform_adjoint(dv, pr, pc, pv, th, tw, gxp):
    """``gxp`` = sum over tiles of ``B dV B^T`` at each tile's place (``P = B``; overwrites ``gxp``)."""
    gxp[:] = 0.0
    n, c = gxp.shape[0], gxp.shape[3]
    d = np.empty((ALPHA, ALPHA, c), dtype=gxp.dtype)
    tmp = np.empty((ALPHA, ALPHA, c), dtype=gxp.dtype)
    out = np.empty((ALPHA, ALPHA, c), dtype=gxp.dtype)
    for b in range(n):
        for ty in range(th):
            for tx in range(tw):
                t = (b * th + ty) * tw + tx
                for i in range(ALPHA):
                    for j in range(ALPHA):
                        for ch in range(c):
                            d[i, j, ch] = dv[ALPHA * i + j, t, ch]
                _two_sided(d, pr, pc, pv, ALPHA, tmp, out)
                r, q = STEP * ty, STEP * tx
                for i in range(ALPHA):
                    for j in range(ALPHA):
                        for ch in range(c):
                            gxp[b, r + i, q + j, ch] += out[i, j, ch]
