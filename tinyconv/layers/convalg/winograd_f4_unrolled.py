"""Unrolled F(4x4, 3x3) transform kernels. GENERATED: do not edit.

Written by ``python devtools/gen_winograd_f4.py``; the matrices and the
loop versions (used for edge tiles) are in :mod:`tinyconv.layers.convalg.winograd_f4`.
``k`` holds the coefficients 2, 4, 5 and 8 in the data's dtype.
"""

from numba import njit

from tinyconv.layers.convalg import winograd_f4 as kw4

CONSTANTS = (2, 4, 5, 8)


@njit(cache=True)
def input_transform(xp, k, th, tw, v):
    """``v[:, t, :] = B^T d B`` for each 6 x 6 tile of ``xp (n, hp, wp, c)``."""
    k2, k4, k5, k8 = k[0], k[1], k[2], k[3]
    n, c = xp.shape[0], xp.shape[3]
    for b in range(n):
        for ty in range(th):
            r = 4 * ty
            for tx in range(tw):
                q = 4 * tx
                t = (b * th + ty) * tw + tx
                for ch in range(c):
                    t0 = k4 * xp[b, r + 0, q + 0, ch] - k5 * xp[b, r + 2, q + 0, ch] + xp[b, r + 4, q + 0, ch]
                    t1 = k4 * xp[b, r + 0, q + 1, ch] - k5 * xp[b, r + 2, q + 1, ch] + xp[b, r + 4, q + 1, ch]
                    t2 = k4 * xp[b, r + 0, q + 2, ch] - k5 * xp[b, r + 2, q + 2, ch] + xp[b, r + 4, q + 2, ch]
                    t3 = k4 * xp[b, r + 0, q + 3, ch] - k5 * xp[b, r + 2, q + 3, ch] + xp[b, r + 4, q + 3, ch]
                    t4 = k4 * xp[b, r + 0, q + 4, ch] - k5 * xp[b, r + 2, q + 4, ch] + xp[b, r + 4, q + 4, ch]
                    t5 = k4 * xp[b, r + 0, q + 5, ch] - k5 * xp[b, r + 2, q + 5, ch] + xp[b, r + 4, q + 5, ch]
                    v[0, t, ch] = k4 * t0 - k5 * t2 + t4
                    v[1, t, ch] = -k4 * t1 - k4 * t2 + t3 + t4
                    v[2, t, ch] = k4 * t1 - k4 * t2 - t3 + t4
                    v[3, t, ch] = -k2 * t1 - t2 + k2 * t3 + t4
                    v[4, t, ch] = k2 * t1 - t2 - k2 * t3 + t4
                    v[5, t, ch] = k4 * t1 - k5 * t3 + t5
                    t0 = -k4 * xp[b, r + 1, q + 0, ch] - k4 * xp[b, r + 2, q + 0, ch] + xp[b, r + 3, q + 0, ch] + xp[b, r + 4, q + 0, ch]
                    t1 = -k4 * xp[b, r + 1, q + 1, ch] - k4 * xp[b, r + 2, q + 1, ch] + xp[b, r + 3, q + 1, ch] + xp[b, r + 4, q + 1, ch]
                    t2 = -k4 * xp[b, r + 1, q + 2, ch] - k4 * xp[b, r + 2, q + 2, ch] + xp[b, r + 3, q + 2, ch] + xp[b, r + 4, q + 2, ch]
                    t3 = -k4 * xp[b, r + 1, q + 3, ch] - k4 * xp[b, r + 2, q + 3, ch] + xp[b, r + 3, q + 3, ch] + xp[b, r + 4, q + 3, ch]
                    t4 = -k4 * xp[b, r + 1, q + 4, ch] - k4 * xp[b, r + 2, q + 4, ch] + xp[b, r + 3, q + 4, ch] + xp[b, r + 4, q + 4, ch]
                    t5 = -k4 * xp[b, r + 1, q + 5, ch] - k4 * xp[b, r + 2, q + 5, ch] + xp[b, r + 3, q + 5, ch] + xp[b, r + 4, q + 5, ch]
                    v[6, t, ch] = k4 * t0 - k5 * t2 + t4
                    v[7, t, ch] = -k4 * t1 - k4 * t2 + t3 + t4
                    v[8, t, ch] = k4 * t1 - k4 * t2 - t3 + t4
                    v[9, t, ch] = -k2 * t1 - t2 + k2 * t3 + t4
                    v[10, t, ch] = k2 * t1 - t2 - k2 * t3 + t4
                    v[11, t, ch] = k4 * t1 - k5 * t3 + t5
                    t0 = k4 * xp[b, r + 1, q + 0, ch] - k4 * xp[b, r + 2, q + 0, ch] - xp[b, r + 3, q + 0, ch] + xp[b, r + 4, q + 0, ch]
                    t1 = k4 * xp[b, r + 1, q + 1, ch] - k4 * xp[b, r + 2, q + 1, ch] - xp[b, r + 3, q + 1, ch] + xp[b, r + 4, q + 1, ch]
                    t2 = k4 * xp[b, r + 1, q + 2, ch] - k4 * xp[b, r + 2, q + 2, ch] - xp[b, r + 3, q + 2, ch] + xp[b, r + 4, q + 2, ch]
                    t3 = k4 * xp[b, r + 1, q + 3, ch] - k4 * xp[b, r + 2, q + 3, ch] - xp[b, r + 3, q + 3, ch] + xp[b, r + 4, q + 3, ch]
                    t4 = k4 * xp[b, r + 1, q + 4, ch] - k4 * xp[b, r + 2, q + 4, ch] - xp[b, r + 3, q + 4, ch] + xp[b, r + 4, q + 4, ch]
                    t5 = k4 * xp[b, r + 1, q + 5, ch] - k4 * xp[b, r + 2, q + 5, ch] - xp[b, r + 3, q + 5, ch] + xp[b, r + 4, q + 5, ch]
                    v[12, t, ch] = k4 * t0 - k5 * t2 + t4
                    v[13, t, ch] = -k4 * t1 - k4 * t2 + t3 + t4
                    v[14, t, ch] = k4 * t1 - k4 * t2 - t3 + t4
                    v[15, t, ch] = -k2 * t1 - t2 + k2 * t3 + t4
                    v[16, t, ch] = k2 * t1 - t2 - k2 * t3 + t4
                    v[17, t, ch] = k4 * t1 - k5 * t3 + t5
                    t0 = -k2 * xp[b, r + 1, q + 0, ch] - xp[b, r + 2, q + 0, ch] + k2 * xp[b, r + 3, q + 0, ch] + xp[b, r + 4, q + 0, ch]
                    t1 = -k2 * xp[b, r + 1, q + 1, ch] - xp[b, r + 2, q + 1, ch] + k2 * xp[b, r + 3, q + 1, ch] + xp[b, r + 4, q + 1, ch]
                    t2 = -k2 * xp[b, r + 1, q + 2, ch] - xp[b, r + 2, q + 2, ch] + k2 * xp[b, r + 3, q + 2, ch] + xp[b, r + 4, q + 2, ch]
                    t3 = -k2 * xp[b, r + 1, q + 3, ch] - xp[b, r + 2, q + 3, ch] + k2 * xp[b, r + 3, q + 3, ch] + xp[b, r + 4, q + 3, ch]
                    t4 = -k2 * xp[b, r + 1, q + 4, ch] - xp[b, r + 2, q + 4, ch] + k2 * xp[b, r + 3, q + 4, ch] + xp[b, r + 4, q + 4, ch]
                    t5 = -k2 * xp[b, r + 1, q + 5, ch] - xp[b, r + 2, q + 5, ch] + k2 * xp[b, r + 3, q + 5, ch] + xp[b, r + 4, q + 5, ch]
                    v[18, t, ch] = k4 * t0 - k5 * t2 + t4
                    v[19, t, ch] = -k4 * t1 - k4 * t2 + t3 + t4
                    v[20, t, ch] = k4 * t1 - k4 * t2 - t3 + t4
                    v[21, t, ch] = -k2 * t1 - t2 + k2 * t3 + t4
                    v[22, t, ch] = k2 * t1 - t2 - k2 * t3 + t4
                    v[23, t, ch] = k4 * t1 - k5 * t3 + t5
                    t0 = k2 * xp[b, r + 1, q + 0, ch] - xp[b, r + 2, q + 0, ch] - k2 * xp[b, r + 3, q + 0, ch] + xp[b, r + 4, q + 0, ch]
                    t1 = k2 * xp[b, r + 1, q + 1, ch] - xp[b, r + 2, q + 1, ch] - k2 * xp[b, r + 3, q + 1, ch] + xp[b, r + 4, q + 1, ch]
                    t2 = k2 * xp[b, r + 1, q + 2, ch] - xp[b, r + 2, q + 2, ch] - k2 * xp[b, r + 3, q + 2, ch] + xp[b, r + 4, q + 2, ch]
                    t3 = k2 * xp[b, r + 1, q + 3, ch] - xp[b, r + 2, q + 3, ch] - k2 * xp[b, r + 3, q + 3, ch] + xp[b, r + 4, q + 3, ch]
                    t4 = k2 * xp[b, r + 1, q + 4, ch] - xp[b, r + 2, q + 4, ch] - k2 * xp[b, r + 3, q + 4, ch] + xp[b, r + 4, q + 4, ch]
                    t5 = k2 * xp[b, r + 1, q + 5, ch] - xp[b, r + 2, q + 5, ch] - k2 * xp[b, r + 3, q + 5, ch] + xp[b, r + 4, q + 5, ch]
                    v[24, t, ch] = k4 * t0 - k5 * t2 + t4
                    v[25, t, ch] = -k4 * t1 - k4 * t2 + t3 + t4
                    v[26, t, ch] = k4 * t1 - k4 * t2 - t3 + t4
                    v[27, t, ch] = -k2 * t1 - t2 + k2 * t3 + t4
                    v[28, t, ch] = k2 * t1 - t2 - k2 * t3 + t4
                    v[29, t, ch] = k4 * t1 - k5 * t3 + t5
                    t0 = k4 * xp[b, r + 1, q + 0, ch] - k5 * xp[b, r + 3, q + 0, ch] + xp[b, r + 5, q + 0, ch]
                    t1 = k4 * xp[b, r + 1, q + 1, ch] - k5 * xp[b, r + 3, q + 1, ch] + xp[b, r + 5, q + 1, ch]
                    t2 = k4 * xp[b, r + 1, q + 2, ch] - k5 * xp[b, r + 3, q + 2, ch] + xp[b, r + 5, q + 2, ch]
                    t3 = k4 * xp[b, r + 1, q + 3, ch] - k5 * xp[b, r + 3, q + 3, ch] + xp[b, r + 5, q + 3, ch]
                    t4 = k4 * xp[b, r + 1, q + 4, ch] - k5 * xp[b, r + 3, q + 4, ch] + xp[b, r + 5, q + 4, ch]
                    t5 = k4 * xp[b, r + 1, q + 5, ch] - k5 * xp[b, r + 3, q + 5, ch] + xp[b, r + 5, q + 5, ch]
                    v[30, t, ch] = k4 * t0 - k5 * t2 + t4
                    v[31, t, ch] = -k4 * t1 - k4 * t2 + t3 + t4
                    v[32, t, ch] = k4 * t1 - k4 * t2 - t3 + t4
                    v[33, t, ch] = -k2 * t1 - t2 + k2 * t3 + t4
                    v[34, t, ch] = k2 * t1 - t2 - k2 * t3 + t4
                    v[35, t, ch] = k4 * t1 - k5 * t3 + t5


@njit(cache=True)
def output_transform(m, k, pr, pc, pv, bias, relu, th, tw, y):
    """``y`` block ``= A^T m A + bias`` (ReLU if ``relu``); edge tiles by the loop kernel."""
    k2, k4, k5, k8 = k[0], k[1], k[2], k[3]
    zero = k[0] - k[0]  # 0 in the data's dtype
    n, oh, ow, f = y.shape
    for b in range(n):
        for ty in range(th):
            r = 4 * ty
            for tx in range(tw):
                q = 4 * tx
                t = (b * th + ty) * tw + tx
                if r + 4 > oh or q + 4 > ow:
                    kw4.output_tile(m, pr, pc, pv, bias, relu, b, ty, tx, th, tw, y)
                    continue
                for o in range(f):
                    t0 = m[0, t, o] + m[6, t, o] + m[12, t, o] + m[18, t, o] + m[24, t, o]
                    t1 = m[1, t, o] + m[7, t, o] + m[13, t, o] + m[19, t, o] + m[25, t, o]
                    t2 = m[2, t, o] + m[8, t, o] + m[14, t, o] + m[20, t, o] + m[26, t, o]
                    t3 = m[3, t, o] + m[9, t, o] + m[15, t, o] + m[21, t, o] + m[27, t, o]
                    t4 = m[4, t, o] + m[10, t, o] + m[16, t, o] + m[22, t, o] + m[28, t, o]
                    t5 = m[5, t, o] + m[11, t, o] + m[17, t, o] + m[23, t, o] + m[29, t, o]
                    u = t0 + t1 + t2 + t3 + t4 + bias[o]
                    y[b, r + 0, q + 0, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k2 * t3 - k2 * t4 + bias[o]
                    y[b, r + 0, q + 1, o] = max(u, zero) if relu else u
                    u = t1 + t2 + k4 * t3 + k4 * t4 + bias[o]
                    y[b, r + 0, q + 2, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k8 * t3 - k8 * t4 + t5 + bias[o]
                    y[b, r + 0, q + 3, o] = max(u, zero) if relu else u
                    t0 = m[6, t, o] - m[12, t, o] + k2 * m[18, t, o] - k2 * m[24, t, o]
                    t1 = m[7, t, o] - m[13, t, o] + k2 * m[19, t, o] - k2 * m[25, t, o]
                    t2 = m[8, t, o] - m[14, t, o] + k2 * m[20, t, o] - k2 * m[26, t, o]
                    t3 = m[9, t, o] - m[15, t, o] + k2 * m[21, t, o] - k2 * m[27, t, o]
                    t4 = m[10, t, o] - m[16, t, o] + k2 * m[22, t, o] - k2 * m[28, t, o]
                    t5 = m[11, t, o] - m[17, t, o] + k2 * m[23, t, o] - k2 * m[29, t, o]
                    u = t0 + t1 + t2 + t3 + t4 + bias[o]
                    y[b, r + 1, q + 0, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k2 * t3 - k2 * t4 + bias[o]
                    y[b, r + 1, q + 1, o] = max(u, zero) if relu else u
                    u = t1 + t2 + k4 * t3 + k4 * t4 + bias[o]
                    y[b, r + 1, q + 2, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k8 * t3 - k8 * t4 + t5 + bias[o]
                    y[b, r + 1, q + 3, o] = max(u, zero) if relu else u
                    t0 = m[6, t, o] + m[12, t, o] + k4 * m[18, t, o] + k4 * m[24, t, o]
                    t1 = m[7, t, o] + m[13, t, o] + k4 * m[19, t, o] + k4 * m[25, t, o]
                    t2 = m[8, t, o] + m[14, t, o] + k4 * m[20, t, o] + k4 * m[26, t, o]
                    t3 = m[9, t, o] + m[15, t, o] + k4 * m[21, t, o] + k4 * m[27, t, o]
                    t4 = m[10, t, o] + m[16, t, o] + k4 * m[22, t, o] + k4 * m[28, t, o]
                    t5 = m[11, t, o] + m[17, t, o] + k4 * m[23, t, o] + k4 * m[29, t, o]
                    u = t0 + t1 + t2 + t3 + t4 + bias[o]
                    y[b, r + 2, q + 0, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k2 * t3 - k2 * t4 + bias[o]
                    y[b, r + 2, q + 1, o] = max(u, zero) if relu else u
                    u = t1 + t2 + k4 * t3 + k4 * t4 + bias[o]
                    y[b, r + 2, q + 2, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k8 * t3 - k8 * t4 + t5 + bias[o]
                    y[b, r + 2, q + 3, o] = max(u, zero) if relu else u
                    t0 = m[6, t, o] - m[12, t, o] + k8 * m[18, t, o] - k8 * m[24, t, o] + m[30, t, o]
                    t1 = m[7, t, o] - m[13, t, o] + k8 * m[19, t, o] - k8 * m[25, t, o] + m[31, t, o]
                    t2 = m[8, t, o] - m[14, t, o] + k8 * m[20, t, o] - k8 * m[26, t, o] + m[32, t, o]
                    t3 = m[9, t, o] - m[15, t, o] + k8 * m[21, t, o] - k8 * m[27, t, o] + m[33, t, o]
                    t4 = m[10, t, o] - m[16, t, o] + k8 * m[22, t, o] - k8 * m[28, t, o] + m[34, t, o]
                    t5 = m[11, t, o] - m[17, t, o] + k8 * m[23, t, o] - k8 * m[29, t, o] + m[35, t, o]
                    u = t0 + t1 + t2 + t3 + t4 + bias[o]
                    y[b, r + 3, q + 0, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k2 * t3 - k2 * t4 + bias[o]
                    y[b, r + 3, q + 1, o] = max(u, zero) if relu else u
                    u = t1 + t2 + k4 * t3 + k4 * t4 + bias[o]
                    y[b, r + 3, q + 2, o] = max(u, zero) if relu else u
                    u = t1 - t2 + k8 * t3 - k8 * t4 + t5 + bias[o]
                    y[b, r + 3, q + 3, o] = max(u, zero) if relu else u


@njit(cache=True)
def output_transform_adjoint(dy, k, pr, pc, pv, th, tw, dm):
    """``dm[:, t, :] = A dY A^T`` per 4 x 4 block of ``dy``; edge tiles by the loop kernel."""
    k2, k4, k5, k8 = k[0], k[1], k[2], k[3]
    n, oh, ow, f = dy.shape
    for b in range(n):
        for ty in range(th):
            r = 4 * ty
            for tx in range(tw):
                q = 4 * tx
                t = (b * th + ty) * tw + tx
                if r + 4 > oh or q + 4 > ow:
                    kw4.output_adjoint_tile(dy, pr, pc, pv, b, ty, tx, th, tw, dm)
                    continue
                for o in range(f):
                    t0 = dy[b, r + 0, q + 0, o]
                    t1 = dy[b, r + 0, q + 1, o]
                    t2 = dy[b, r + 0, q + 2, o]
                    t3 = dy[b, r + 0, q + 3, o]
                    dm[0, t, o] = t0
                    dm[1, t, o] = t0 + t1 + t2 + t3
                    dm[2, t, o] = t0 - t1 + t2 - t3
                    dm[3, t, o] = t0 + k2 * t1 + k4 * t2 + k8 * t3
                    dm[4, t, o] = t0 - k2 * t1 + k4 * t2 - k8 * t3
                    dm[5, t, o] = t3
                    t0 = dy[b, r + 0, q + 0, o] + dy[b, r + 1, q + 0, o] + dy[b, r + 2, q + 0, o] + dy[b, r + 3, q + 0, o]
                    t1 = dy[b, r + 0, q + 1, o] + dy[b, r + 1, q + 1, o] + dy[b, r + 2, q + 1, o] + dy[b, r + 3, q + 1, o]
                    t2 = dy[b, r + 0, q + 2, o] + dy[b, r + 1, q + 2, o] + dy[b, r + 2, q + 2, o] + dy[b, r + 3, q + 2, o]
                    t3 = dy[b, r + 0, q + 3, o] + dy[b, r + 1, q + 3, o] + dy[b, r + 2, q + 3, o] + dy[b, r + 3, q + 3, o]
                    dm[6, t, o] = t0
                    dm[7, t, o] = t0 + t1 + t2 + t3
                    dm[8, t, o] = t0 - t1 + t2 - t3
                    dm[9, t, o] = t0 + k2 * t1 + k4 * t2 + k8 * t3
                    dm[10, t, o] = t0 - k2 * t1 + k4 * t2 - k8 * t3
                    dm[11, t, o] = t3
                    t0 = dy[b, r + 0, q + 0, o] - dy[b, r + 1, q + 0, o] + dy[b, r + 2, q + 0, o] - dy[b, r + 3, q + 0, o]
                    t1 = dy[b, r + 0, q + 1, o] - dy[b, r + 1, q + 1, o] + dy[b, r + 2, q + 1, o] - dy[b, r + 3, q + 1, o]
                    t2 = dy[b, r + 0, q + 2, o] - dy[b, r + 1, q + 2, o] + dy[b, r + 2, q + 2, o] - dy[b, r + 3, q + 2, o]
                    t3 = dy[b, r + 0, q + 3, o] - dy[b, r + 1, q + 3, o] + dy[b, r + 2, q + 3, o] - dy[b, r + 3, q + 3, o]
                    dm[12, t, o] = t0
                    dm[13, t, o] = t0 + t1 + t2 + t3
                    dm[14, t, o] = t0 - t1 + t2 - t3
                    dm[15, t, o] = t0 + k2 * t1 + k4 * t2 + k8 * t3
                    dm[16, t, o] = t0 - k2 * t1 + k4 * t2 - k8 * t3
                    dm[17, t, o] = t3
                    t0 = dy[b, r + 0, q + 0, o] + k2 * dy[b, r + 1, q + 0, o] + k4 * dy[b, r + 2, q + 0, o] + k8 * dy[b, r + 3, q + 0, o]
                    t1 = dy[b, r + 0, q + 1, o] + k2 * dy[b, r + 1, q + 1, o] + k4 * dy[b, r + 2, q + 1, o] + k8 * dy[b, r + 3, q + 1, o]
                    t2 = dy[b, r + 0, q + 2, o] + k2 * dy[b, r + 1, q + 2, o] + k4 * dy[b, r + 2, q + 2, o] + k8 * dy[b, r + 3, q + 2, o]
                    t3 = dy[b, r + 0, q + 3, o] + k2 * dy[b, r + 1, q + 3, o] + k4 * dy[b, r + 2, q + 3, o] + k8 * dy[b, r + 3, q + 3, o]
                    dm[18, t, o] = t0
                    dm[19, t, o] = t0 + t1 + t2 + t3
                    dm[20, t, o] = t0 - t1 + t2 - t3
                    dm[21, t, o] = t0 + k2 * t1 + k4 * t2 + k8 * t3
                    dm[22, t, o] = t0 - k2 * t1 + k4 * t2 - k8 * t3
                    dm[23, t, o] = t3
                    t0 = dy[b, r + 0, q + 0, o] - k2 * dy[b, r + 1, q + 0, o] + k4 * dy[b, r + 2, q + 0, o] - k8 * dy[b, r + 3, q + 0, o]
                    t1 = dy[b, r + 0, q + 1, o] - k2 * dy[b, r + 1, q + 1, o] + k4 * dy[b, r + 2, q + 1, o] - k8 * dy[b, r + 3, q + 1, o]
                    t2 = dy[b, r + 0, q + 2, o] - k2 * dy[b, r + 1, q + 2, o] + k4 * dy[b, r + 2, q + 2, o] - k8 * dy[b, r + 3, q + 2, o]
                    t3 = dy[b, r + 0, q + 3, o] - k2 * dy[b, r + 1, q + 3, o] + k4 * dy[b, r + 2, q + 3, o] - k8 * dy[b, r + 3, q + 3, o]
                    dm[24, t, o] = t0
                    dm[25, t, o] = t0 + t1 + t2 + t3
                    dm[26, t, o] = t0 - t1 + t2 - t3
                    dm[27, t, o] = t0 + k2 * t1 + k4 * t2 + k8 * t3
                    dm[28, t, o] = t0 - k2 * t1 + k4 * t2 - k8 * t3
                    dm[29, t, o] = t3
                    t0 = dy[b, r + 3, q + 0, o]
                    t1 = dy[b, r + 3, q + 1, o]
                    t2 = dy[b, r + 3, q + 2, o]
                    t3 = dy[b, r + 3, q + 3, o]
                    dm[30, t, o] = t0
                    dm[31, t, o] = t0 + t1 + t2 + t3
                    dm[32, t, o] = t0 - t1 + t2 - t3
                    dm[33, t, o] = t0 + k2 * t1 + k4 * t2 + k8 * t3
                    dm[34, t, o] = t0 - k2 * t1 + k4 * t2 - k8 * t3
                    dm[35, t, o] = t3


@njit(cache=True)
def input_transform_adjoint(dv, k, th, tw, gxp):
    """``gxp`` = sum over tiles of ``B dV B^T`` at each tile's place (overwrites it)."""
    k2, k4, k5, k8 = k[0], k[1], k[2], k[3]
    gxp[:] = 0.0
    n, c = gxp.shape[0], gxp.shape[3]
    for b in range(n):
        for ty in range(th):
            r = 4 * ty
            for tx in range(tw):
                q = 4 * tx
                t = (b * th + ty) * tw + tx
                for ch in range(c):
                    t0 = k4 * dv[0, t, ch]
                    t1 = k4 * dv[1, t, ch]
                    t2 = k4 * dv[2, t, ch]
                    t3 = k4 * dv[3, t, ch]
                    t4 = k4 * dv[4, t, ch]
                    t5 = k4 * dv[5, t, ch]
                    gxp[b, r + 0, q + 0, ch] += k4 * t0
                    gxp[b, r + 0, q + 1, ch] += -k4 * t1 + k4 * t2 - k2 * t3 + k2 * t4 + k4 * t5
                    gxp[b, r + 0, q + 2, ch] += -k5 * t0 - k4 * t1 - k4 * t2 - t3 - t4
                    gxp[b, r + 0, q + 3, ch] += t1 - t2 + k2 * t3 - k2 * t4 - k5 * t5
                    gxp[b, r + 0, q + 4, ch] += t0 + t1 + t2 + t3 + t4
                    gxp[b, r + 0, q + 5, ch] += t5
                    t0 = -k4 * dv[6, t, ch] + k4 * dv[12, t, ch] - k2 * dv[18, t, ch] + k2 * dv[24, t, ch] + k4 * dv[30, t, ch]
                    t1 = -k4 * dv[7, t, ch] + k4 * dv[13, t, ch] - k2 * dv[19, t, ch] + k2 * dv[25, t, ch] + k4 * dv[31, t, ch]
                    t2 = -k4 * dv[8, t, ch] + k4 * dv[14, t, ch] - k2 * dv[20, t, ch] + k2 * dv[26, t, ch] + k4 * dv[32, t, ch]
                    t3 = -k4 * dv[9, t, ch] + k4 * dv[15, t, ch] - k2 * dv[21, t, ch] + k2 * dv[27, t, ch] + k4 * dv[33, t, ch]
                    t4 = -k4 * dv[10, t, ch] + k4 * dv[16, t, ch] - k2 * dv[22, t, ch] + k2 * dv[28, t, ch] + k4 * dv[34, t, ch]
                    t5 = -k4 * dv[11, t, ch] + k4 * dv[17, t, ch] - k2 * dv[23, t, ch] + k2 * dv[29, t, ch] + k4 * dv[35, t, ch]
                    gxp[b, r + 1, q + 0, ch] += k4 * t0
                    gxp[b, r + 1, q + 1, ch] += -k4 * t1 + k4 * t2 - k2 * t3 + k2 * t4 + k4 * t5
                    gxp[b, r + 1, q + 2, ch] += -k5 * t0 - k4 * t1 - k4 * t2 - t3 - t4
                    gxp[b, r + 1, q + 3, ch] += t1 - t2 + k2 * t3 - k2 * t4 - k5 * t5
                    gxp[b, r + 1, q + 4, ch] += t0 + t1 + t2 + t3 + t4
                    gxp[b, r + 1, q + 5, ch] += t5
                    t0 = -k5 * dv[0, t, ch] - k4 * dv[6, t, ch] - k4 * dv[12, t, ch] - dv[18, t, ch] - dv[24, t, ch]
                    t1 = -k5 * dv[1, t, ch] - k4 * dv[7, t, ch] - k4 * dv[13, t, ch] - dv[19, t, ch] - dv[25, t, ch]
                    t2 = -k5 * dv[2, t, ch] - k4 * dv[8, t, ch] - k4 * dv[14, t, ch] - dv[20, t, ch] - dv[26, t, ch]
                    t3 = -k5 * dv[3, t, ch] - k4 * dv[9, t, ch] - k4 * dv[15, t, ch] - dv[21, t, ch] - dv[27, t, ch]
                    t4 = -k5 * dv[4, t, ch] - k4 * dv[10, t, ch] - k4 * dv[16, t, ch] - dv[22, t, ch] - dv[28, t, ch]
                    t5 = -k5 * dv[5, t, ch] - k4 * dv[11, t, ch] - k4 * dv[17, t, ch] - dv[23, t, ch] - dv[29, t, ch]
                    gxp[b, r + 2, q + 0, ch] += k4 * t0
                    gxp[b, r + 2, q + 1, ch] += -k4 * t1 + k4 * t2 - k2 * t3 + k2 * t4 + k4 * t5
                    gxp[b, r + 2, q + 2, ch] += -k5 * t0 - k4 * t1 - k4 * t2 - t3 - t4
                    gxp[b, r + 2, q + 3, ch] += t1 - t2 + k2 * t3 - k2 * t4 - k5 * t5
                    gxp[b, r + 2, q + 4, ch] += t0 + t1 + t2 + t3 + t4
                    gxp[b, r + 2, q + 5, ch] += t5
                    t0 = dv[6, t, ch] - dv[12, t, ch] + k2 * dv[18, t, ch] - k2 * dv[24, t, ch] - k5 * dv[30, t, ch]
                    t1 = dv[7, t, ch] - dv[13, t, ch] + k2 * dv[19, t, ch] - k2 * dv[25, t, ch] - k5 * dv[31, t, ch]
                    t2 = dv[8, t, ch] - dv[14, t, ch] + k2 * dv[20, t, ch] - k2 * dv[26, t, ch] - k5 * dv[32, t, ch]
                    t3 = dv[9, t, ch] - dv[15, t, ch] + k2 * dv[21, t, ch] - k2 * dv[27, t, ch] - k5 * dv[33, t, ch]
                    t4 = dv[10, t, ch] - dv[16, t, ch] + k2 * dv[22, t, ch] - k2 * dv[28, t, ch] - k5 * dv[34, t, ch]
                    t5 = dv[11, t, ch] - dv[17, t, ch] + k2 * dv[23, t, ch] - k2 * dv[29, t, ch] - k5 * dv[35, t, ch]
                    gxp[b, r + 3, q + 0, ch] += k4 * t0
                    gxp[b, r + 3, q + 1, ch] += -k4 * t1 + k4 * t2 - k2 * t3 + k2 * t4 + k4 * t5
                    gxp[b, r + 3, q + 2, ch] += -k5 * t0 - k4 * t1 - k4 * t2 - t3 - t4
                    gxp[b, r + 3, q + 3, ch] += t1 - t2 + k2 * t3 - k2 * t4 - k5 * t5
                    gxp[b, r + 3, q + 4, ch] += t0 + t1 + t2 + t3 + t4
                    gxp[b, r + 3, q + 5, ch] += t5
                    t0 = dv[0, t, ch] + dv[6, t, ch] + dv[12, t, ch] + dv[18, t, ch] + dv[24, t, ch]
                    t1 = dv[1, t, ch] + dv[7, t, ch] + dv[13, t, ch] + dv[19, t, ch] + dv[25, t, ch]
                    t2 = dv[2, t, ch] + dv[8, t, ch] + dv[14, t, ch] + dv[20, t, ch] + dv[26, t, ch]
                    t3 = dv[3, t, ch] + dv[9, t, ch] + dv[15, t, ch] + dv[21, t, ch] + dv[27, t, ch]
                    t4 = dv[4, t, ch] + dv[10, t, ch] + dv[16, t, ch] + dv[22, t, ch] + dv[28, t, ch]
                    t5 = dv[5, t, ch] + dv[11, t, ch] + dv[17, t, ch] + dv[23, t, ch] + dv[29, t, ch]
                    gxp[b, r + 4, q + 0, ch] += k4 * t0
                    gxp[b, r + 4, q + 1, ch] += -k4 * t1 + k4 * t2 - k2 * t3 + k2 * t4 + k4 * t5
                    gxp[b, r + 4, q + 2, ch] += -k5 * t0 - k4 * t1 - k4 * t2 - t3 - t4
                    gxp[b, r + 4, q + 3, ch] += t1 - t2 + k2 * t3 - k2 * t4 - k5 * t5
                    gxp[b, r + 4, q + 4, ch] += t0 + t1 + t2 + t3 + t4
                    gxp[b, r + 4, q + 5, ch] += t5
                    t0 = dv[30, t, ch]
                    t1 = dv[31, t, ch]
                    t2 = dv[32, t, ch]
                    t3 = dv[33, t, ch]
                    t4 = dv[34, t, ch]
                    t5 = dv[35, t, ch]
                    gxp[b, r + 5, q + 0, ch] += k4 * t0
                    gxp[b, r + 5, q + 1, ch] += -k4 * t1 + k4 * t2 - k2 * t3 + k2 * t4 + k4 * t5
                    gxp[b, r + 5, q + 2, ch] += -k5 * t0 - k4 * t1 - k4 * t2 - t3 - t4
                    gxp[b, r + 5, q + 3, ch] += t1 - t2 + k2 * t3 - k2 * t4 - k5 * t5
                    gxp[b, r + 5, q + 4, ch] += t0 + t1 + t2 + t3 + t4
                    gxp[b, r + 5, q + 5, ch] += t5
