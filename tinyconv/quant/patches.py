"""Sliding-window views shared by the float and the integer reference kernels.

Both references compute a convolution as patches times weights; the patches
come from one helper so that padding, stride and cropping are the same in
both. Padding is with zeros, which is real 0 for the float path and, because
the integer path subtracts the zero point first, real 0 there too.
"""

from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from tinyconv.arch import Op


def conv_patches(x: np.ndarray, op: Op) -> np.ndarray:
    """Every k x k window a conv or dwconv op reads, zero-padded.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
        The op's input (any numeric dtype; padded with 0 of that dtype).
    op : Op
        A ``conv`` or ``dwconv`` op (kernel, stride, pads, out_shape).

    Returns
    -------
    ndarray, shape (n, oh, ow, k, k, c)
        A view where possible; element ``[i, y, x, ky, kx, ch]`` is the padded
        input at ``(y s + ky, x s + kx, ch)``.
    """
    top, bottom, left, right = op.pads
    k, s = op.kernel, op.stride
    oh, ow = op.out_shape[0], op.out_shape[1]
    xp = np.pad(x, ((0, 0), (top, bottom), (left, right), (0, 0))) if any(op.pads) else x
    # windows: (n, H - k + 1, W - k + 1, c, k, k)
    win = sliding_window_view(xp, (k, k), axis=(1, 2))
    win = win[:, : (oh - 1) * s + 1 : s, : (ow - 1) * s + 1 : s]
    # (n, oh, ow, c, ky, kx) -> (n, oh, ow, ky, kx, c)
    return win.transpose(0, 1, 2, 4, 5, 3)


def pool_windows(x: np.ndarray, size: int) -> np.ndarray:
    """Non-overlapping ``size x size`` windows, the ragged edge dropped.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)

    Returns
    -------
    ndarray, shape (n, h // size, w // size, size * size, c)
    """
    n, h, w, c = x.shape
    oh, ow = h // size, w // size
    # (n, oh, size, ow, size, c) -> (n, oh, ow, size, size, c)
    v = x[:, : oh * size, : ow * size].reshape(n, oh, size, ow, size, c)
    return v.transpose(0, 1, 3, 2, 4, 5).reshape(n, oh, ow, size * size, c)
