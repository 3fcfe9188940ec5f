"""Activation ranges from calibration images, and the (scale, zero point) they give.

Each tensor a weighted step writes is quantised per tensor, asymmetrically:
``r = S (q - Z)`` with ``q`` in [-128, 127] (Jacob et al., CVPR 2018, eq. 1).
The range is the **minimum and maximum** the float network reaches on the
calibration images, widened to contain 0 so that real 0 (padding, ReLU
floor) is exactly ``q = Z``. Min/max keeps every calibration activation
representable and needs no tuning knob; a percentile clip would trade rare
saturated outliers for finer steps, which matters for wide, heavy-tailed
activations more than for the small ReLU networks tinyconv searches.
Pooling steps keep their input's scale and zero point, so they need no range.
"""

from __future__ import annotations

import numpy as np

from tinyconv.quant.fold import Step
from tinyconv.quant.floatref import run_step

QMIN, QMAX = -128, 127


def activation_ranges(steps: tuple[Step, ...], x: np.ndarray,
                      batch: int = 64) -> list[tuple[float, float]]:
    """Min and max of every step's float output over the calibration batch.

    Parameters
    ----------
    steps : tuple of Step
    x : ndarray, shape (n, h, w, c)
        Normalised float calibration images, n >= 1.
    batch : int
        Images per forward pass (bounds the memory of the patches).

    Returns
    -------
    list of (lo, hi), one per step.
    """
    if x.shape[0] < 1:
        raise ValueError("need at least one calibration image")
    lo = [np.inf] * len(steps)
    hi = [-np.inf] * len(steps)
    for start in range(0, x.shape[0], batch):
        y = x[start:start + batch]
        for i, step in enumerate(steps):
            y = run_step(step, y)
            lo[i] = min(lo[i], float(y.min()))
            hi[i] = max(hi[i], float(y.max()))
    return list(zip(lo, hi))


def scale_zero_point(lo: float, hi: float) -> tuple[float, int]:
    """Asymmetric int8 parameters for the real range [lo, hi].

    Returns
    -------
    scale : float
        ``(hi - lo) / 255`` after widening the range to contain 0.
    zero_point : int
        ``round(-128 - lo / scale)`` in [-128, 127]: the integer that stands
        for real 0 exactly (Jacob et al., CVPR 2018, §2.1).

    Notes
    -----
    An all-zero range (a dead ReLU layer) gets ``scale = 1/255`` and
    ``zero_point = -128``: any scale represents 0 exactly.
    """
    if not (np.isfinite(lo) and np.isfinite(hi)):
        raise ValueError(f"activation range must be finite, got [{lo}, {hi}]")
    lo, hi = min(float(lo), 0.0), max(float(hi), 0.0)
    if hi - lo <= 1e-12:
        return 1.0 / 255.0, QMIN
    scale = (hi - lo) / (QMAX - QMIN)
    zp = int(np.clip(np.round(QMIN - lo / scale), QMIN, QMAX))
    return scale, zp
