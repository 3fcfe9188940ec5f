"""Slow, obviously-right loop references of every kernel (for the tests).

Plain Python loops over every index, written straight from the definitions,
with no reshapes or tricks. They are meant for tiny shapes only.
"""

from __future__ import annotations

import numpy as np


def pad(x: np.ndarray, pads: tuple[int, int, int, int]) -> np.ndarray:
    """Zero-pad ``(n, h, w, c)`` by ``(top, bottom, left, right)``."""
    top, bottom, left, right = pads
    n, h, w, c = x.shape
    out = np.zeros((n, h + top + bottom, w + left + right, c), dtype=x.dtype)
    for b in range(n):
        for y in range(h):
            for xx in range(w):
                out[b, y + top, xx + left, :] = x[b, y, xx, :]
    return out


def conv_forward(x, w, bias, stride, pads):
    """``y[b, oy, ox, f] = bias[f] + sum_{i, j, ch} xp[b, oy*s+i, ox*s+j, ch] * w[i, j, ch, f]``."""
    xp = pad(x, pads)
    n, hp, wp, c = xp.shape
    kh, kw, _, nf = w.shape
    oh, ow = (hp - kh) // stride + 1, (wp - kw) // stride + 1
    y = np.zeros((n, oh, ow, nf), dtype=np.float64)
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for f in range(nf):
                    acc = float(bias[f])
                    for i in range(kh):
                        for j in range(kw):
                            for ch in range(c):
                                acc += xp[b, oy * stride + i, ox * stride + j, ch] * w[i, j, ch, f]
                    y[b, oy, ox, f] = acc
    return y


def conv_backward(grad_out, x, w, stride, pads):
    """Gradients ``(grad_x, grad_w, grad_b)`` of :func:`conv_forward`, by the chain rule per term."""
    xp = pad(x, pads)
    n, oh, ow, nf = grad_out.shape
    kh, kw, c, _ = w.shape
    gxp = np.zeros(xp.shape)
    gw = np.zeros(w.shape)
    gb = np.zeros(nf)
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for f in range(nf):
                    g = grad_out[b, oy, ox, f]
                    gb[f] += g
                    for i in range(kh):
                        for j in range(kw):
                            for ch in range(c):
                                r, q = oy * stride + i, ox * stride + j
                                gw[i, j, ch, f] += g * xp[b, r, q, ch]
                                gxp[b, r, q, ch] += g * w[i, j, ch, f]
    top, _, left, _ = pads
    return gxp[:, top:top + x.shape[1], left:left + x.shape[2], :], gw, gb


def im2col(xp, kh, kw, stride):
    """Rows of receptive fields, ``(n * oh * ow, kh * kw * c)``, in (b, y, x) x (i, j, ch) order."""
    n, hp, wp, c = xp.shape
    oh, ow = (hp - kh) // stride + 1, (wp - kw) // stride + 1
    rows = []
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                row = []
                for i in range(kh):
                    for j in range(kw):
                        for ch in range(c):
                            row.append(xp[b, oy * stride + i, ox * stride + j, ch])
                rows.append(row)
    return np.array(rows, dtype=xp.dtype).reshape(n * oh * ow, kh * kw * c)


def col2im(cols, xp_shape, kh, kw, stride):
    """Adjoint of :func:`im2col`: add each column entry back to its pixel."""
    n, hp, wp, c = xp_shape
    oh, ow = (hp - kh) // stride + 1, (wp - kw) // stride + 1
    out = np.zeros(xp_shape, dtype=cols.dtype)
    r = 0
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                q = 0
                for i in range(kh):
                    for j in range(kw):
                        for ch in range(c):
                            out[b, oy * stride + i, ox * stride + j, ch] += cols[r, q]
                            q += 1
                r += 1
    return out


def depthwise_forward(x, w, bias, stride, pads):
    """``y[b, oy, ox, ch] = bias[ch] + sum_{i, j} xp[b, oy*s+i, ox*s+j, ch] * w[i, j, ch]``."""
    xp = pad(x, pads)
    n, hp, wp, c = xp.shape
    kh, kw, _ = w.shape
    oh, ow = (hp - kh) // stride + 1, (wp - kw) // stride + 1
    y = np.zeros((n, oh, ow, c))
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    acc = float(bias[ch])
                    for i in range(kh):
                        for j in range(kw):
                            acc += xp[b, oy * stride + i, ox * stride + j, ch] * w[i, j, ch]
                    y[b, oy, ox, ch] = acc
    return y


def depthwise_backward(grad_out, x, w, stride, pads):
    """Gradients ``(grad_x, grad_w, grad_b)`` of :func:`depthwise_forward`."""
    xp = pad(x, pads)
    n, oh, ow, c = grad_out.shape
    kh, kw, _ = w.shape
    gxp = np.zeros(xp.shape)
    gw = np.zeros(w.shape)
    gb = np.zeros(c)
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    g = grad_out[b, oy, ox, ch]
                    gb[ch] += g
                    for i in range(kh):
                        for j in range(kw):
                            r, q = oy * stride + i, ox * stride + j
                            gw[i, j, ch] += g * xp[b, r, q, ch]
                            gxp[b, r, q, ch] += g * w[i, j, ch]
    top, _, left, _ = pads
    return gxp[:, top:top + x.shape[1], left:left + x.shape[2], :], gw, gb


def maxpool_forward(x, s):
    """Max of each ``s x s`` window (stride s, floor) and the flat index of the first maximum."""
    n, h, w, c = x.shape
    oh, ow = h // s, w // s
    y = np.zeros((n, oh, ow, c), dtype=x.dtype)
    arg = np.zeros((n, oh, ow, c), dtype=np.int32)
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    window = [x[b, oy * s + i, ox * s + j, ch] for i in range(s) for j in range(s)]
                    best = max(window)
                    y[b, oy, ox, ch] = best
                    arg[b, oy, ox, ch] = window.index(best)
    return y, arg


def maxpool_backward(grad_out, x, s):
    """Gradient of :func:`maxpool_forward`: each output's gradient to its first maximum."""
    _, arg = maxpool_forward(x, s)
    gx = np.zeros(x.shape, dtype=grad_out.dtype)
    n, oh, ow, c = grad_out.shape
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    a = int(arg[b, oy, ox, ch])
                    gx[b, oy * s + a // s, ox * s + a % s, ch] += grad_out[b, oy, ox, ch]
    return gx


def avgpool_forward(x, s):
    """Mean of each ``s x s`` window (stride s, floor)."""
    n, h, w, c = x.shape
    oh, ow = h // s, w // s
    y = np.zeros((n, oh, ow, c))
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    total = 0.0
                    for i in range(s):
                        for j in range(s):
                            total += x[b, oy * s + i, ox * s + j, ch]
                    y[b, oy, ox, ch] = total / (s * s)
    return y


def avgpool_backward(grad_out, x_shape, s):
    """Gradient of :func:`avgpool_forward`."""
    gx = np.zeros(x_shape)
    n, oh, ow, c = grad_out.shape
    for b in range(n):
        for oy in range(oh):
            for ox in range(ow):
                for ch in range(c):
                    for i in range(s):
                        for j in range(s):
                            gx[b, oy * s + i, ox * s + j, ch] += grad_out[b, oy, ox, ch] / (s * s)
    return gx


def relu(x):
    """``max(x, 0)`` element by element."""
    flat = [v if v > 0 else 0.0 for v in np.asarray(x, dtype=np.float64).ravel()]
    return np.array(flat).reshape(np.shape(x))


def relu_backward(grad_out, x):
    """``grad_out`` where ``x > 0``, else 0."""
    g, xs = np.asarray(grad_out).ravel(), np.asarray(x).ravel()
    return np.array([g[i] if xs[i] > 0 else 0.0 for i in range(g.size)]).reshape(np.shape(x))


def bias_relu(y, b):
    """``max(y + b, 0)`` with ``b`` added along the last axis."""
    out = np.zeros(y.shape)
    flat, ys = out.reshape(-1, y.shape[-1]), np.asarray(y).reshape(-1, y.shape[-1])
    for r in range(flat.shape[0]):
        for ch in range(flat.shape[1]):
            v = ys[r, ch] + b[ch]
            flat[r, ch] = v if v > 0 else 0.0
    return out


def batchnorm_train(x, gamma, beta, eps):
    """Per channel ``gamma * (x - mean) / sqrt(var + eps) + beta`` with batch mean and biased variance."""
    c = x.shape[-1]
    rows = np.asarray(x, dtype=np.float64).reshape(-1, c)
    out = np.zeros(rows.shape)
    for ch in range(c):
        col = rows[:, ch]
        mean = sum(col) / len(col)
        var = sum((v - mean) ** 2 for v in col) / len(col)
        for r in range(rows.shape[0]):
            out[r, ch] = gamma[ch] * (col[r] - mean) / np.sqrt(var + eps) + beta[ch]
    return out.reshape(x.shape)


def residual_add(x, skip):
    """``y[i] = x[i] + skip[i]`` over every index of two arrays of one shape."""
    y = np.zeros(x.shape, dtype=np.float64)
    for idx in np.ndindex(*x.shape):
        y[idx] = x[idx] + skip[idx]
    return y


def stack_channels(xs):
    """``y[b, i, j, offset_k + ch] = xs[k][b, i, j, ch]``: maps stacked along the channels."""
    n, h, w = xs[0].shape[:3]
    y = np.zeros((n, h, w, sum(x.shape[3] for x in xs)), dtype=np.float64)
    for b in range(n):
        for i in range(h):
            for j in range(w):
                at = 0
                for x in xs:
                    for ch in range(x.shape[3]):
                        y[b, i, j, at + ch] = x[b, i, j, ch]
                    at += x.shape[3]
    return y


def split_channels(grad_out, channels):
    """The inverse of :func:`stack_channels` on a gradient: each input's channels."""
    n, h, w, _ = grad_out.shape
    parts = [np.zeros((n, h, w, c), dtype=np.float64) for c in channels]
    for b in range(n):
        for i in range(h):
            for j in range(w):
                at = 0
                for part, c in zip(parts, channels):
                    for ch in range(c):
                        part[b, i, j, ch] = grad_out[b, i, j, at + ch]
                    at += c
    return parts
