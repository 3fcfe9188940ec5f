"""Per-channel standardisation fitted on training images only.

``fit_normalisation`` sees the training part of a fold and nothing else;
``normalise`` applies those statistics to any images (training, held-out,
or on the device later). Mean and std are stored with the network.
"""

from __future__ import annotations

import numpy as np

STD_FLOOR = 1e-3  # a constant channel (e.g. saturation of grey images) divides by this


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
    flat = x.reshape(-1, x.shape[-1]).astype(np.float64)   # (n*h*w, c)
    mean = flat.mean(axis=0)
    std = np.maximum(flat.std(axis=0), STD_FLOOR)
    return mean.astype(np.float32), std.astype(np.float32)


def normalise(x: np.ndarray, mean: np.ndarray, std: np.ndarray) -> np.ndarray:
    """``(x - mean) / std`` per channel, float32, shape as ``x`` (..., c)."""
    mean = np.asarray(mean, dtype=np.float32)
    std = np.asarray(std, dtype=np.float32)
    if mean.shape != (x.shape[-1],) or std.shape != mean.shape:
        raise ValueError(f"mean and std must have shape ({x.shape[-1]},) for images with "
                         f"{x.shape[-1]} channels, got {mean.shape} and {std.shape}")
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
    x_train = x[train]
    mean, std = fit_normalisation(x_train)
    return normalise(x_train, mean, std), normalise(x[held_out], mean, std), mean, std
