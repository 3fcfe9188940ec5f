"""Images as a network reads them: resized, in its colour mode, in [0, 1]."""

from __future__ import annotations

import numpy as np

from tinyconv.arch import InputSpec

from .colour import convert
from .resize import resize


def prepare(images: np.ndarray, spec: InputSpec) -> np.ndarray:
    """Resize ``images`` to ``spec``'s size and convert them to its colour mode.

    Parameters
    ----------
    images : ndarray, shape (n, h, w, c), c 1 or 3
        uint8 (0..255) or float in [0, 1].
    spec : InputSpec
        Target ``h``, ``w`` and ``mode`` (rgb, gray, ycc, hsv, or several joined
        by ``+``: each converted, then stacked along the channels in order).

    Returns
    -------
    ndarray, shape (n, spec.h, spec.w, spec.channels), float32 in [0, 1]

    Notes
    -----
    The resize (area averaging when shrinking, bilinear when growing) comes
    first, then the colour conversion (see :mod:`.colour`); grey images
    are repeated to RGB for the colour modes.
    """
    if images.ndim != 4 or images.shape[-1] not in (1, 3):
        raise ValueError(f"images must have shape (n, h, w, 1|3), got {images.shape}")
    if images.dtype == np.uint8:
        x = images.astype(np.float32) * np.float32(1.0 / 255.0)
    elif images.dtype.kind == "f":
        x = images.astype(np.float32, copy=False)
    else:
        raise TypeError(f"images must be uint8 or float, got {images.dtype}")
    x = resize(x, spec.h, spec.w)
    planes = [convert(x, mode) for mode in spec.modes]
    if len(planes) > 1:
        # the engine's stacking op (imported here: plain modes need no engine import)
        from tinyconv.layers.merge import stack_forward
        x = stack_forward(planes)
    else:
        x = planes[0]
    return np.clip(x, 0.0, 1.0).astype(np.float32, copy=False)
