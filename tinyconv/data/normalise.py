"""Per-channel standardisation fitted on training images only.

``fit_normalisation`` sees the training part of a fold and nothing else;
``normalise`` applies those statistics to any images (training, held-out,
or on the device later). Mean and std are stored with the network.
"""

from __future__ import annotations

import numpy as np

STD_FLOOR = 1e-3  # a constant channel (e.g. saturation of grey images) divides by this
#: Values (pixels x channels) converted to float64 at a time by ``fit_normalisation``.
CHUNK_VALUES = 1 << 16


def fit_normalisation(x_train: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard deviation of each channel over the training images.

    Parameters
    ----------
    x_train : ndarray, shape (n, h, w, c)
        Prepared training images (float in [0, 1]).

    Returns
    -------
    mean, std : ndarray, shape (c,), float32
        ``std`` is floored at :data:`STD_FLOOR` so that dividing is safe.
    """
    x = np.asarray(x_train)
    if x.ndim != 4 or x.shape[0] == 0:
        raise ValueError(f"x_train must have shape (n, h, w, c) with n >= 1, got {x.shape}")
    flat = x.reshape(-1, x.shape[-1])                        # (n*h*w, c), no copy if contiguous
    count = flat.shape[0]
    mean = exact_sum(flat, lambda v: v.astype(np.float64)) / count
    var = exact_sum(flat, lambda v: np.square(v.astype(np.float64) - mean)) / count
    std = np.maximum(np.sqrt(var), STD_FLOOR)
    return mean.astype(np.float32), std.astype(np.float32)


def exact_sum(flat: np.ndarray, f, chunk: int | None = None) -> np.ndarray:
    """``f(flat).sum(axis=0)`` bit for bit, with ``f`` applied to a few rows at a time.

    NumPy sums a (rows, c) float64 array over axis 0 row after row when ``c > 1``
    and pairwise (halves split on multiples of 8) when ``c == 1``; this follows
    the same order, so that ``f``'s float64 values never exist for the whole
    array at once (at most ``chunk`` values, default :data:`CHUNK_VALUES`).

    Parameters
    ----------
    flat : ndarray, shape (rows, c)
    f : callable mapping a block of rows (float32) to float64 values of its shape

    Returns
    -------
    ndarray, shape (c,), float64
    """
    chunk = CHUNK_VALUES if chunk is None else chunk
    rows, c = flat.shape
    if c == 1:
        return np.array([_pairwise(flat[:, 0], f, chunk)])
    step = max(1, chunk // c)
    total = np.add.reduce(f(flat[:step]), axis=0)
    for start in range(step, rows, step):  # the running sum continues row by row
        total = np.add.reduce(np.concatenate([total[None], f(flat[start:start + step])]),
                              axis=0)
    return total


def _pairwise(v: np.ndarray, f, chunk: int) -> float:
    """NumPy's pairwise sum of ``f(v)`` (1-D): its own halving above ``chunk`` values."""
    n = v.shape[0]
    if n <= max(chunk, 128):
        return np.add.reduce(f(v))
    half = n // 2
    half -= half % 8
    return _pairwise(v[:half], f, chunk) + _pairwise(v[half:], f, chunk)


def normalise(x: np.ndarray, mean: np.ndarray, std: np.ndarray,
              out: np.ndarray | None = None) -> np.ndarray:
    """``(x - mean) / std`` per channel, float32, shape as ``x`` (..., c).

    ``out`` (float32, shape as ``x``; may be ``x`` itself) receives the result,
    bit for bit the same, without a new array.
    """
    mean = np.asarray(mean, dtype=np.float32)
    std = np.asarray(std, dtype=np.float32)
    if mean.shape != (x.shape[-1],) or std.shape != mean.shape:
        raise ValueError(f"mean and std must have shape ({x.shape[-1]},) for images with "
                         f"{x.shape[-1]} channels, got {mean.shape} and {std.shape}")
    if out is not None:
        np.subtract(x, mean, out=out)
        return np.divide(out, std, out=out)
    return ((x.astype(np.float32, copy=False) - mean) / std).astype(np.float32, copy=False)


def normalise_fold(x: np.ndarray, train: np.ndarray, held_out: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Standardise one fold with statistics of its training part only.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
        Prepared images of the whole data set.
    train, held_out : ndarray of int
        Indices of the fold's training and held-out images.

    Returns
    -------
    x_train, x_held_out : ndarray, float32
        Both parts normalised with the training statistics.
    mean, std : ndarray, shape (c,), float32
        Those statistics (store them with the network).
    """
    x_train, x_held = x[train], x[held_out]  # copies (index arrays), normalised in place
    mean, std = fit_normalisation(x_train)

    def apply(part: np.ndarray) -> np.ndarray:
        return normalise(part, mean, std, out=part if part.dtype == np.float32 else None)

    return apply(x_train), apply(x_held), mean, std
