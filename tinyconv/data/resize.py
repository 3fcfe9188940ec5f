"""Resizing a batch of images: area averaging to shrink, bilinear to grow.

Each axis is resized on its own by a small (out, in) weight matrix applied to
every image at once, so there are no per-pixel Python loops.

* Shrinking an axis (out < in): output pixel i averages the input over
  ``[i * in/out, (i + 1) * in/out)``, each input pixel weighted by the length
  of its overlap (area averaging; the image mean is kept exactly).
* Growing an axis (out > in): bilinear interpolation with pixel centres at
  half-integers, ``src = (i + 0.5) * in/out - 0.5``, clamped at the edges
  (common practice).
"""

from __future__ import annotations

import numpy as np


def area_weights(n_in: int, n_out: int) -> np.ndarray:
    """Area-averaging matrix, shape (n_out, n_in), rows summing to 1 (n_out <= n_in)."""
    scale = n_in / n_out
    lo = np.arange(n_out)[:, None] * scale            # (n_out, 1) interval starts
    hi = lo + scale
    j = np.arange(n_in)[None, :]                       # (1, n_in) input pixel [j, j+1)
    overlap = np.clip(np.minimum(hi, j + 1) - np.maximum(lo, j), 0.0, None)
    return overlap / scale


def bilinear_weights(n_in: int, n_out: int) -> np.ndarray:
    """Bilinear matrix, shape (n_out, n_in), rows summing to 1."""
    src = (np.arange(n_out) + 0.5) * (n_in / n_out) - 0.5
    src = np.clip(src, 0.0, n_in - 1)
    left = np.floor(src).astype(np.int64)
    right = np.minimum(left + 1, n_in - 1)
    frac = src - left
    m = np.zeros((n_out, n_in))
    rows = np.arange(n_out)
    np.add.at(m, (rows, left), 1.0 - frac)
    np.add.at(m, (rows, right), frac)
    return m


def axis_weights(n_in: int, n_out: int) -> np.ndarray | None:
    """The matrix for one axis, or None when the size does not change."""
    if n_out == n_in:
        return None
    return area_weights(n_in, n_out) if n_out < n_in else bilinear_weights(n_in, n_out)


def resize(images: np.ndarray, h: int, w: int) -> np.ndarray:
    """Resize a batch to ``h x w``.

    Parameters
    ----------
    images : ndarray, shape (n, h0, w0, c)
        Any real dtype; uint8 input gives float32 output in 0..255.
    h, w : int
        Output size.

    Returns
    -------
    ndarray, shape (n, h, w, c), float32 (or float64 for float64 input)
        The input itself (as float) when the size already matches.
    """
    if images.ndim != 4:
        raise ValueError(f"images must have shape (n, h, w, c), got {images.shape}")
    if h < 1 or w < 1:
        raise ValueError(f"output size must be positive, got {h}x{w}")
    dtype = np.float64 if images.dtype == np.float64 else np.float32
    x = images.astype(dtype, copy=False)
    n, h0, w0, c = x.shape
    wh = axis_weights(h0, h)
    if wh is not None:
        # (h, h0) @ (n, h0, w0*c) -> (n, h, w0*c)
        x = np.matmul(wh.astype(dtype), x.reshape(n, h0, w0 * c)).reshape(n, h, w0, c)
    ww = axis_weights(w0, w)
    if ww is not None:
        # per row: (w, w0) @ (w0, c); as one batched product over n*h rows
        rows = x.reshape(n * h, w0, c)
        x = np.matmul(ww.astype(dtype), rows).reshape(n, h, w, c)
    return x


def resize_uint8(images: np.ndarray, h: int, w: int) -> np.ndarray:
    """Resize uint8 images and round back to uint8."""
    if images.shape[1:3] == (h, w):
        return images
    out = resize(images, h, w)
    return np.clip(np.rint(out), 0, 255).astype(np.uint8)
