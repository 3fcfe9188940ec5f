"""Weight initialisation."""

from __future__ import annotations

import numpy as np


def he_normal(rng: np.random.Generator, shape: tuple[int, ...], fan_in: int,
              dtype=np.float32) -> np.ndarray:
    """Draw ``N(0, 2 / fan_in)`` weights (He et al., ICCV 2015).

    Parameters
    ----------
    rng : numpy.random.Generator
    shape : tuple of int
    fan_in : int
        Inputs feeding one output: ``k * k * c_in`` (conv), ``k * k``
        (depthwise), ``n_in`` (dense).
    """
    if fan_in < 1:
        raise ValueError(f"fan_in must be at least 1, got {fan_in}")
    std = np.sqrt(2.0 / fan_in)
    return (rng.standard_normal(shape) * std).astype(dtype)
