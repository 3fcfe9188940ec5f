"""Colour modes a network can read: rgb, gray, ycc and hsv, all in [0, 1].

* gray: ITU-R BT.601 luma ``Y' = 0.299 R' + 0.587 G' + 0.114 B'``;
* ycc: full-range YCbCr of ITU-T T.871 (JPEG/JFIF), divided by 255 and
  clipped to [0, 1] (``Cb = -0.168736 R - 0.331264 G + 0.5 B + 128`` on the
  0..255 scale, similarly Cr);
* hsv: hue, saturation and value as in the standard library's
  ``colorsys.rgb_to_hsv`` (hue in [0, 1), 0 for greys).
"""

from __future__ import annotations

import numpy as np

MODES = ("rgb", "gray", "ycc", "hsv")

# ITU-R BT.601 luma weights; ITU-T T.871 chroma rows
_LUMA = np.array([0.299, 0.587, 0.114])
_YCC = np.array([[0.299, 0.587, 0.114],
                 [-0.168736, -0.331264, 0.5],
                 [0.5, -0.418688, -0.081312]])
_YCC_OFFSET = np.array([0.0, 128.0, 128.0]) / 255.0


def to_rgb(x: np.ndarray) -> np.ndarray:
    """Grey (c = 1) to RGB by repetition; RGB unchanged. Shape (..., 1|3) -> (..., 3)."""
    if x.shape[-1] == 3:
        return x
    if x.shape[-1] != 1:
        raise ValueError(f"expected 1 or 3 channels, got {x.shape[-1]}")
    return np.repeat(x, 3, axis=-1)


def rgb_to_gray(x: np.ndarray) -> np.ndarray:
    """BT.601 luma, shape (..., 3) in [0, 1] -> (..., 1)."""
    return (x @ _LUMA.astype(x.dtype))[..., None]


def rgb_to_ycc(x: np.ndarray) -> np.ndarray:
    """Full-range YCbCr (T.871), shape (..., 3) in [0, 1] -> (..., 3) in [0, 1]."""
    y = x @ _YCC.T.astype(x.dtype) + _YCC_OFFSET.astype(x.dtype)
    return np.clip(y, 0.0, 1.0, out=y)


def rgb_to_hsv(x: np.ndarray) -> np.ndarray:
    """HSV as ``colorsys.rgb_to_hsv``, vectorised; shape (..., 3) in [0, 1]."""
    r, g, b = x[..., 0], x[..., 1], x[..., 2]
    v = x.max(axis=-1)
    mn = x.min(axis=-1)
    span = v - mn
    grey = span == 0
    safe_span = np.where(grey, 1, span)
    s = np.where(v == 0, 0, span / np.where(v == 0, 1, v))
    rc = (v - r) / safe_span
    gc = (v - g) / safe_span
    bc = (v - b) / safe_span
    # colorsys: r is max -> bc - gc; elif g is max -> 2 + rc - bc; else 4 + gc - rc
    h = np.where(r == v, bc - gc, np.where(g == v, 2.0 + rc - bc, 4.0 + gc - rc))
    h = np.where(grey, 0, (h / 6.0) % 1.0)
    return np.stack([h, s, v], axis=-1).astype(x.dtype, copy=False)


def convert(x: np.ndarray, mode: str) -> np.ndarray:
    """Images in [0, 1] with 1 or 3 channels to colour ``mode``.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, 1|3), float
    mode : {"rgb", "gray", "ycc", "hsv"}

    Returns
    -------
    ndarray, shape (n, h, w, 1) for gray else (n, h, w, 3), same dtype
    """
    if mode not in MODES:
        raise ValueError(f"colour mode {mode!r} is not one of {', '.join(MODES)}")
    if mode == "gray":
        return x if x.shape[-1] == 1 else rgb_to_gray(x)
    rgb = to_rgb(x)
    if mode == "rgb":
        return rgb
    return rgb_to_ycc(rgb) if mode == "ycc" else rgb_to_hsv(rgb)
