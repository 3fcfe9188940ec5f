"""Winograd F(2x2, 3x3) kernels for 3 x 3, stride-1 convolutions.

The minimal-filtering algorithm of Lavin and Gray ("Fast Algorithms for
Convolutional Neural Networks", CVPR 2016) computes each 2 x 2 block of
outputs from a 4 x 4 input tile with 16 multiplications per channel pair
instead of 36:

    Y = A^T [ (G g G^T) * (B^T d B) ] A

with ``g`` the 3 x 3 filter, ``d`` the tile and ``*`` the element-wise
product. Over the channels the 16 element-wise products become 16 matrix
products ``M[e] = V[e] @ U[e]`` (``V`` the transformed tiles, ``U`` the
transformed filters): 2.25 times fewer multiply-adds than the direct
convolution, all of them in BLAS.

The map is linear in both ``d`` and ``g``, so its exact adjoints give the
gradients: ``dM[e] = (A dY A^T)[e]``, ``dU[e] = V[e]^T @ dM[e]``,
``dg = G^T dU G``, ``dV[e] = dM[e] @ U[e]^T`` and ``dd = B dV B^T``
scattered back onto the (overlapping) tiles.

Layouts: the padded input ``xp (n, hp, wp, c)`` with ``hp = 2 * th + 2``,
``wp = 2 * tw + 2`` (``th, tw`` tiles per axis); transformed tiles
``(16, n * th * tw, c)`` and products ``(16, n * th * tw, f)``, tile ``t``
being ``(b * th + ty) * tw + tx``; element ``e = 4 * i + j``. The channel axis
is innermost everywhere so that each kernel's inner loop is a contiguous run.
"""

from __future__ import annotations

import numpy as np
from numba import njit

# The transform matrices (Lavin and Gray 2016, section 4.1).
BT = np.array([[1, 0, -1, 0],
               [0, 1, 1, 0],
               [0, -1, 1, 0],
               [0, 1, 0, -1]], dtype=np.float64)
G = np.array([[1.0, 0.0, 0.0],
              [0.5, 0.5, 0.5],
              [0.5, -0.5, 0.5],
              [0.0, 0.0, 1.0]])
AT = np.array([[1, 1, 1, 0],
               [0, 1, -1, -1]], dtype=np.float64)


def plane_buffer(tiles: int, channels: int, dtype, planes: int = 16) -> np.ndarray:
    """An uninitialised ``(planes, tiles, channels)`` array whose planes are not 4 KiB apart.

    The transform kernels read or write all planes of one tile together. When
    the distance between planes is a multiple of 4 KiB (``tiles * channels`` a
    multiple of 1024 floats, as with 64 tiles of 32 channels), the streams
    fall into the same cache sets and evict each other: measured 7x slower on
    the input transform. The plane stride is therefore rounded up to a multiple
    of 4 KiB plus 256 bytes. Each plane stays C-contiguous, so BLAS takes it as is.
    """
    itemsize = np.dtype(dtype).itemsize
    plane = tiles * channels
    per_page = 4096 // itemsize
    stride = -(-plane // per_page) * per_page + 256 // itemsize
    flat = np.empty((planes - 1) * stride + plane, dtype=dtype)
    return np.lib.stride_tricks.as_strided(
        flat, shape=(planes, tiles, channels),
        strides=(stride * itemsize, channels * itemsize, itemsize), writeable=True)


def tiles(oh: int, ow: int) -> tuple[int, int]:
    """Tiles per axis covering an ``oh x ow`` output: ``(ceil(oh / 2), ceil(ow / 2))``."""
    return (oh + 1) // 2, (ow + 1) // 2


# Both filter transforms in one product: GG[4 i + j, 3 a + b] = G[i, a] G[j, b].
GG = np.kron(G, G)


def filter_product(gg: np.ndarray, w: np.ndarray) -> np.ndarray:
    """``U = G w G^T`` per channel pair, with ``gg = kron(G, G)``: ``(3, 3, c, f) -> (len(gg), c, f)``."""
    c, f = w.shape[2], w.shape[3]
    return (gg.astype(w.dtype) @ w.reshape(9, c * f)).reshape(gg.shape[0], c, f)


def filter_product_adjoint(gg: np.ndarray, du: np.ndarray) -> np.ndarray:
    """``dw = G^T dU G``, the adjoint of :func:`filter_product`: ``(len(gg), c, f) -> (3, 3, c, f)``."""
    c, f = du.shape[1], du.shape[2]
    return (gg.T.astype(du.dtype) @ du.reshape(gg.shape[0], c * f)).reshape(3, 3, c, f)


def filter_transform(w: np.ndarray) -> np.ndarray:
    """``U = G w G^T`` per channel pair: ``w (3, 3, c, f) -> (16, c, f)``, same dtype."""
    return filter_product(GG, w)


def filter_transform_adjoint(du: np.ndarray) -> np.ndarray:
    """Adjoint of :func:`filter_transform`: ``dU (16, c, f) -> dw = G^T dU G (3, 3, c, f)``."""
    return filter_product_adjoint(GG, du)


@njit(cache=True)
def input_transform(xp, th, tw, v):
    """``v[:, t, :] = B^T d B`` for each 4 x 4 tile ``d`` of ``xp (n, hp, wp, c)``."""
    n, _, _, c = xp.shape
    for b in range(n):
        for ty in range(th):
            r = 2 * ty
            for tx in range(tw):
                q = 2 * tx
                t = (b * th + ty) * tw + tx
                for ch in range(c):
                    d00 = xp[b, r, q, ch]
                    d01 = xp[b, r, q + 1, ch]
                    d02 = xp[b, r, q + 2, ch]
                    d03 = xp[b, r, q + 3, ch]
                    d10 = xp[b, r + 1, q, ch]
                    d11 = xp[b, r + 1, q + 1, ch]
                    d12 = xp[b, r + 1, q + 2, ch]
                    d13 = xp[b, r + 1, q + 3, ch]
                    d20 = xp[b, r + 2, q, ch]
                    d21 = xp[b, r + 2, q + 1, ch]
                    d22 = xp[b, r + 2, q + 2, ch]
                    d23 = xp[b, r + 2, q + 3, ch]
                    d30 = xp[b, r + 3, q, ch]
                    d31 = xp[b, r + 3, q + 1, ch]
                    d32 = xp[b, r + 3, q + 2, ch]
                    d33 = xp[b, r + 3, q + 3, ch]
                    # Rows: B^T d.
                    a0 = d00 - d20
                    a1 = d01 - d21
                    a2 = d02 - d22
                    a3 = d03 - d23
                    b0 = d10 + d20
                    b1 = d11 + d21
                    b2 = d12 + d22
                    b3 = d13 + d23
                    c0 = d20 - d10
                    c1 = d21 - d11
                    c2 = d22 - d12
                    c3 = d23 - d13
                    e0 = d10 - d30
                    e1 = d11 - d31
                    e2 = d12 - d32
                    e3 = d13 - d33
                    # Columns: (B^T d) B.
                    v[0, t, ch] = a0 - a2
                    v[1, t, ch] = a1 + a2
                    v[2, t, ch] = a2 - a1
                    v[3, t, ch] = a1 - a3
                    v[4, t, ch] = b0 - b2
                    v[5, t, ch] = b1 + b2
                    v[6, t, ch] = b2 - b1
                    v[7, t, ch] = b1 - b3
                    v[8, t, ch] = c0 - c2
                    v[9, t, ch] = c1 + c2
                    v[10, t, ch] = c2 - c1
                    v[11, t, ch] = c1 - c3
                    v[12, t, ch] = e0 - e2
                    v[13, t, ch] = e1 + e2
                    v[14, t, ch] = e2 - e1
                    v[15, t, ch] = e1 - e3


@njit(cache=True)
def output_transform(m, bias, relu, th, tw, y):
    """``y`` block ``= A^T m A + bias`` (then ReLU if ``relu``), for ``y (n, oh, ow, f)``.

    Outputs of a tile that fall past ``oh`` or ``ow`` (odd sizes) are dropped.
    """
    n, oh, ow, f = y.shape
    for b in range(n):
        for ty in range(th):
            r = 2 * ty
            row2 = r + 1 < oh
            for tx in range(tw):
                q = 2 * tx
                col2 = q + 1 < ow
                t = (b * th + ty) * tw + tx
                for o in range(f):
                    # Rows: A^T m.
                    s0 = m[0, t, o] + m[4, t, o] + m[8, t, o]
                    s1 = m[1, t, o] + m[5, t, o] + m[9, t, o]
                    s2 = m[2, t, o] + m[6, t, o] + m[10, t, o]
                    s3 = m[3, t, o] + m[7, t, o] + m[11, t, o]
                    u0 = m[4, t, o] - m[8, t, o] - m[12, t, o]
                    u1 = m[5, t, o] - m[9, t, o] - m[13, t, o]
                    u2 = m[6, t, o] - m[10, t, o] - m[14, t, o]
                    u3 = m[7, t, o] - m[11, t, o] - m[15, t, o]
                    # Columns: (A^T m) A, plus the bias.
                    y00 = s0 + s1 + s2 + bias[o]
                    y01 = s1 - s2 - s3 + bias[o]
                    y10 = u0 + u1 + u2 + bias[o]
                    y11 = u1 - u2 - u3 + bias[o]
                    if relu:
                        y00 = max(y00, 0.0)
                        y01 = max(y01, 0.0)
                        y10 = max(y10, 0.0)
                        y11 = max(y11, 0.0)
                    y[b, r, q, o] = y00
                    if col2:
                        y[b, r, q + 1, o] = y01
                    if row2:
                        y[b, r + 1, q, o] = y10
                        if col2:
                            y[b, r + 1, q + 1, o] = y11


@njit(cache=True)
def output_transform_adjoint(dy, th, tw, dm):
    """``dm[:, t, :] = A dY A^T`` for each 2 x 2 block of ``dy (n, oh, ow, f)`` (zero past the edge)."""
    n, oh, ow, f = dy.shape
    for b in range(n):
        for ty in range(th):
            r = 2 * ty
            row2 = r + 1 < oh
            for tx in range(tw):
                q = 2 * tx
                col2 = q + 1 < ow
                t = (b * th + ty) * tw + tx
                for o in range(f):
                    g00 = dy[b, r, q, o]
                    g01 = dy[b, r, q + 1, o] if col2 else 0.0
                    g10 = dy[b, r + 1, q, o] if row2 else 0.0
                    g11 = dy[b, r + 1, q + 1, o] if row2 and col2 else 0.0
                    # Rows: A dY (A is 4 x 2).
                    p0, p1 = g00, g01
                    w0, w1 = g00 + g10, g01 + g11
                    z0, z1 = g00 - g10, g01 - g11
                    k0, k1 = -g10, -g11
                    # Columns: (A dY) A^T.
                    dm[0, t, o] = p0
                    dm[1, t, o] = p0 + p1
                    dm[2, t, o] = p0 - p1
                    dm[3, t, o] = -p1
                    dm[4, t, o] = w0
                    dm[5, t, o] = w0 + w1
                    dm[6, t, o] = w0 - w1
                    dm[7, t, o] = -w1
                    dm[8, t, o] = z0
                    dm[9, t, o] = z0 + z1
                    dm[10, t, o] = z0 - z1
                    dm[11, t, o] = -z1
                    dm[12, t, o] = k0
                    dm[13, t, o] = k0 + k1
                    dm[14, t, o] = k0 - k1
                    dm[15, t, o] = -k1


@njit(cache=True)
def input_transform_adjoint(dv, th, tw, gxp):
    """``gxp`` = sum over tiles of ``B dV B^T`` at each tile's place (overwrites ``gxp``)."""
    gxp[:] = 0.0
    n, _, _, c = gxp.shape
    for b in range(n):
        for ty in range(th):
            r = 2 * ty
            for tx in range(tw):
                q = 2 * tx
                t = (b * th + ty) * tw + tx
                for ch in range(c):
                    # Columns first: X B^T row by row (B^T d B's adjoint is B dV B^T).
                    x00 = dv[0, t, ch]
                    x01 = dv[1, t, ch] - dv[2, t, ch] + dv[3, t, ch]
                    x02 = dv[2, t, ch] + dv[1, t, ch] - dv[0, t, ch]
                    x03 = -dv[3, t, ch]
                    x10 = dv[4, t, ch]
                    x11 = dv[5, t, ch] - dv[6, t, ch] + dv[7, t, ch]
                    x12 = dv[6, t, ch] + dv[5, t, ch] - dv[4, t, ch]
                    x13 = -dv[7, t, ch]
                    x20 = dv[8, t, ch]
                    x21 = dv[9, t, ch] - dv[10, t, ch] + dv[11, t, ch]
                    x22 = dv[10, t, ch] + dv[9, t, ch] - dv[8, t, ch]
                    x23 = -dv[11, t, ch]
                    x30 = dv[12, t, ch]
                    x31 = dv[13, t, ch] - dv[14, t, ch] + dv[15, t, ch]
                    x32 = dv[14, t, ch] + dv[13, t, ch] - dv[12, t, ch]
                    x33 = -dv[15, t, ch]
                    # Rows: B (X B^T).
                    gxp[b, r, q, ch] += x00
                    gxp[b, r, q + 1, ch] += x01
                    gxp[b, r, q + 2, ch] += x02
                    gxp[b, r, q + 3, ch] += x03
                    gxp[b, r + 1, q, ch] += x10 - x20 + x30
                    gxp[b, r + 1, q + 1, ch] += x11 - x21 + x31
                    gxp[b, r + 1, q + 2, ch] += x12 - x22 + x32
                    gxp[b, r + 1, q + 3, ch] += x13 - x23 + x33
                    gxp[b, r + 2, q, ch] += x20 + x10 - x00
                    gxp[b, r + 2, q + 1, ch] += x21 + x11 - x01
                    gxp[b, r + 2, q + 2, ch] += x22 + x12 - x02
                    gxp[b, r + 2, q + 3, ch] += x23 + x13 - x03
                    gxp[b, r + 3, q, ch] -= x30
                    gxp[b, r + 3, q + 1, ch] -= x31
                    gxp[b, r + 3, q + 2, ch] -= x32
                    gxp[b, r + 3, q + 3, ch] -= x33
