"""Kernels of the standard convolution: padding, im2col, col2im.

The convolution is a matrix product: every output pixel's receptive field is
copied into one row of a column matrix (im2col), the rows are multiplied by the
weights reshaped to ``(kh * kw * c_in, f)`` (one BLAS GEMM), and the backward
pass scatters the column gradients back onto the padded input (col2im).

Slow loop references of each function live in :mod:`tinyconv.layers.reference`.
"""

from __future__ import annotations

import numpy as np
from numba import njit


def padded_shape(shape: tuple[int, int, int, int],
                 pads: tuple[int, int, int, int]) -> tuple[int, int, int, int]:
    """Shape ``(n, h + top + bottom, w + left + right, c)`` of a padded map."""
    n, h, w, c = shape
    top, bottom, left, right = pads
    return (n, h + top + bottom, w + left + right, c)


def pad_nhwc(x: np.ndarray, pads: tuple[int, int, int, int],
             out: np.ndarray | None = None) -> np.ndarray:
    """Zero-pad the two spatial axes of ``x``.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
    pads : (top, bottom, left, right)
    out : ndarray, shape (n, h + top + bottom, w + left + right, c), optional
        A buffer to reuse. Its border must be zero (as left by an earlier call:
        only the interior is ever written).

    Returns
    -------
    ndarray
        ``x`` itself when all pads are zero, else the padded map.
    """
    top, bottom, left, right = pads
    if top == bottom == left == right == 0:
        return x
    n, h, w, c = x.shape
    shape = padded_shape(x.shape, pads)
    if out is None or out.shape != shape or out.dtype != x.dtype:
        out = np.zeros(shape, dtype=x.dtype)
    out[:, top:top + h, left:left + w, :] = x
    return out


#: Target bytes of one chunk's column matrix (about a core's L2 cache): im2col and its
#: product, and the column gradient and col2im, run over chunks of whole images of
#: about this size, so that the product reads columns still in cache.
COLS_CHUNK_BYTES = 1 << 20


def chunk_rows(rows_per_image: int, width: int, itemsize: int, n: int) -> int:
    """Images per chunk whose ``(rows, width)`` column matrix is near :data:`COLS_CHUNK_BYTES`."""
    return int(min(n, max(1, COLS_CHUNK_BYTES // max(1, rows_per_image * width * itemsize))))


def conv_out_size(size: int, kernel: int, stride: int) -> int:
    """Output size of a padded axis: ``(size - k) // s + 1`` (common practice)."""
    return (size - kernel) // stride + 1


def im2col(xp: np.ndarray, kh: int, kw: int, stride: int,
           out: np.ndarray | None = None) -> np.ndarray:
    """Copy receptive fields into rows.

    Parameters
    ----------
    xp : ndarray, shape (n, hp, wp, c)
        The padded input.
    kh, kw, stride : int
    out : ndarray, shape (n, oh, ow, kh, kw, c), optional
        Buffer to fill (reused when the shape and dtype match).

    Returns
    -------
    ndarray, shape (n * oh * ow, kh * kw * c)
        Row ``(b, y, x)`` holds ``xp[b, y*s : y*s+kh, x*s : x*s+kw, :]`` in C
        order, matching ``w.reshape(kh * kw * c, f)``. A 1 x 1 kernel of stride
        1 needs no copy and returns a view of ``xp``.
    """
    n, hp, wp, c = xp.shape
    oh, ow = conv_out_size(hp, kh, stride), conv_out_size(wp, kw, stride)
    if kh == kw == 1 and stride == 1:
        return np.ascontiguousarray(xp).reshape(n * hp * wp, c)
    shape = (n, oh, ow, kh, kw, c)
    if out is None or out.shape != shape or out.dtype != xp.dtype:
        out = np.empty(shape, dtype=xp.dtype)
    xp = np.ascontiguousarray(xp)
    # Views (n, hp, wp * c) and (n, oh, ow, kh, kw * c): in NHWC the kw pixels
    # of one kernel row are one contiguous run of kw * c values.
    _im2col_kernel(xp.reshape(n, hp, wp * c), c, stride, out.reshape(n, oh, ow, kh, kw * c))
    return out.reshape(n * oh * ow, kh * kw * c)


@njit(cache=True)
def _im2col_kernel(xp, c, stride, out):
    """Copy ``xp (n, hp, wp*c)`` into ``out (n, oh, ow, kh, kw*c)``, one kernel row at a time.

    Each kernel row is copied from a slice (indexed from 0), a loop LLVM
    vectorises with one overlap check; the 9-value run of a 3 x 3 kernel on
    3 channels (RGB input) is too short for that and is copied through nine
    locals, all loaded before any is stored, which vectorises without the
    check. Measured against the former loops (kernel row outside the pixel
    loop for short runs) at batch 64: 2.5-4x faster for c_in = 3, 2-4x for
    8, 16 and 32.
    """
    n, oh, ow, kh, span = out.shape
    for b in range(n):
        for y in range(oh):
            for x in range(ow):
                start = x * stride * c
                for i in range(kh):
                    src = xp[b, y * stride + i, start:start + span]
                    dst = out[b, y, x, i]
                    if span == 9:
                        _copy9(src, dst)
                    elif span == 3:
                        _copy3(src, dst)
                    else:
                        for q in range(span):
                            dst[q] = src[q]


@njit(cache=True, inline="always")
def _copy3(src, dst):
    """``dst[:3] = src[:3]``, every load before the first store (a 3 x 3 kernel's row on
    one grey channel)."""
    a0, a1, a2 = src[0], src[1], src[2]
    dst[0], dst[1], dst[2] = a0, a1, a2


@njit(cache=True, inline="always")
def _copy9(src, dst):
    """``dst[:9] = src[:9]``, every load before the first store."""
    a0, a1, a2, a3, a4 = src[0], src[1], src[2], src[3], src[4]
    a5, a6, a7, a8 = src[5], src[6], src[7], src[8]
    dst[0], dst[1], dst[2], dst[3], dst[4] = a0, a1, a2, a3, a4
    dst[5], dst[6], dst[7], dst[8] = a5, a6, a7, a8


def col2im(cols: np.ndarray, xp_shape: tuple[int, int, int, int], kh: int, kw: int,
           stride: int, out: np.ndarray | None = None) -> np.ndarray:
    """Scatter-add column gradients back onto the padded input (im2col's adjoint).

    Parameters
    ----------
    cols : ndarray, shape (n * oh * ow, kh * kw * c)
    xp_shape : (n, hp, wp, c)
        Shape of the padded input.
    out : ndarray, shape xp_shape, optional
        Buffer to overwrite.

    Returns
    -------
    ndarray, shape (n, hp, wp, c)
    """
    n, hp, wp, c = xp_shape
    oh, ow = conv_out_size(hp, kh, stride), conv_out_size(wp, kw, stride)
    if kh == kw == 1 and stride == 1:
        return cols.reshape(xp_shape)
    if out is None or out.shape != tuple(xp_shape) or out.dtype != cols.dtype:
        out = np.empty(xp_shape, dtype=cols.dtype)
    cols = np.ascontiguousarray(cols).reshape(n, oh, ow, kh, kw * c)
    _col2im_kernel(cols, c, stride, out.reshape(n, hp, wp * c))
    return out


@njit(cache=True)
def _col2im_kernel(cols, c, stride, out):
    """``out (n, hp, wp*c)`` = sum of ``cols (n, oh, ow, kh, kw*c)`` at their pixels.

    Adds in the order of the pixel walk (rows, then pixels, then kernel rows),
    through slices indexed from 0 as in :func:`_im2col_kernel`.
    """
    out[:] = 0
    n, oh, ow, kh, span = cols.shape
    for b in range(n):
        for y in range(oh):
            for x in range(ow):
                start = x * stride * c
                for i in range(kh):
                    src = cols[b, y, x, i]
                    dst = out[b, y * stride + i, start:start + span]
                    if span == 9:
                        _add9(src, dst)
                    else:
                        for q in range(span):
                            dst[q] += src[q]


@njit(cache=True, inline="always")
def _add9(src, dst):
    """``dst[:9] += src[:9]``, every load before the first store."""
    a0, a1, a2, a3, a4 = dst[0] + src[0], dst[1] + src[1], dst[2] + src[2], dst[3] + src[3], dst[4] + src[4]
    a5, a6, a7, a8 = dst[5] + src[5], dst[6] + src[6], dst[7] + src[7], dst[8] + src[8]
    dst[0], dst[1], dst[2], dst[3], dst[4] = a0, a1, a2, a3, a4
    dst[5], dst[6], dst[7], dst[8] = a5, a6, a7, a8


def crop_nhwc(xp: np.ndarray, pads: tuple[int, int, int, int], h: int, w: int) -> np.ndarray:
    """The interior ``(n, h, w, c)`` of a padded map: ``xp`` itself if nothing is cropped, else a new array.

    Always a copy when cropped, even where the slice would be contiguous (one
    image cropped only at the bottom), so that callers may reuse ``xp``.
    """
    top, _, left, _ = pads
    if xp.shape[1] == h and xp.shape[2] == w:
        return xp
    return xp[:, top:top + h, left:left + w, :].copy()
