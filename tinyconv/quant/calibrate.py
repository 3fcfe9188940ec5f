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

The same pass can gather, per weighted step, the second moment ``E[x x^T]``
of the inputs each output value reads (its patch, or the whole vector for
dense), for rounding with error feedback (:mod:`tinyconv.quant.rounding`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tinyconv.quant.fold import Step, run_graph
from tinyconv.quant.floatref import run_step
from tinyconv.quant.patches import conv_patches
from tinyconv.quant.rounding import MIN_SAMPLES_PER_INPUT

QMIN, QMAX = -128, 127


def activation_ranges(steps: tuple[Step, ...], x: np.ndarray,
                      batch: int = 64) -> list[tuple[float, float]]:
    """Min and max of every step's float output over the calibration images.

    Parameters
    ----------
    steps : tuple of Step
    x : ndarray, shape (n, h, w, c)
        Normalised float calibration images, n >= 1.

    Returns
    -------
    list of (lo, hi), one per step.
    """
    return calibrate(steps, x, batch, moments=False).ranges


@dataclass(frozen=True, eq=False)
class Calibration:
    """What the calibration pass measured, one entry per step.

    Attributes
    ----------
    ranges : list of (lo, hi)
        Min and max of each step's float output.
    moments : list of ndarray or None
        For weighted steps with enough samples: ``E[x x^T]`` of the inputs of
        one output value (conv, dense ``(m, m)``; dwconv ``(c, k*k, k*k)``).
    samples : list of int
        Input samples behind each moment (0 when none was gathered).
    """

    ranges: list[tuple[float, float]]
    moments: list[np.ndarray | None]
    samples: list[int]


def _positions(step: Step) -> int:
    """Input samples one image gives a weighted step (output positions)."""
    return step.op.out_shape[0] * step.op.out_shape[1] if step.kind != "dense" else 1


def _fan_in(step: Step) -> int:
    if step.kind == "conv":
        return step.op.kernel ** 2 * step.op.in_shape[2]
    if step.kind == "dwconv":
        return step.op.kernel ** 2
    return int(np.prod(step.op.in_shape))


def _moment(step: Step, x: np.ndarray) -> np.ndarray:
    """Sum over this batch of the outer products of one output value's inputs."""
    if step.kind == "dense":
        flat = x.reshape(x.shape[0], -1)
        return flat.T @ flat
    cols = conv_patches(x, step.op)  # (n, oh, ow, k, k, c)
    k, c = step.op.kernel, x.shape[3]
    if step.kind == "conv":
        flat = cols.reshape(-1, k * k * c)  # rows in the order of w.reshape(k*k*c, f)
        return flat.T @ flat
    flat = cols.reshape(-1, k * k, c)  # dwconv: channel c reads only channel c
    return np.einsum("rpc,rqc->cpq", flat, flat, optimize=True)


def calibrate(steps: tuple[Step, ...], x: np.ndarray, batch: int = 64,
              moments: bool = True) -> Calibration:
    """Ranges of every step's output and, optionally, input moments.

    Parameters
    ----------
    steps : tuple of Step
    x : ndarray, shape (n, h, w, c)
        Normalised float calibration images, n >= 1.
    batch : int
        Images per forward pass (bounds the memory of the patches).
    moments : bool
        Gather input moments for weighted steps that get at least
        ``MIN_SAMPLES_PER_INPUT`` samples per weight.
    """
    n = x.shape[0]
    if n < 1:
        raise ValueError("need at least one calibration image")
    want = [moments and s.w is not None and n * _positions(s) >= MIN_SAMPLES_PER_INPUT * _fan_in(s)
            for s in steps]
    sums: list[np.ndarray | None] = [None] * len(steps)
    lo = [np.inf] * len(steps)
    hi = [-np.inf] * len(steps)
    index = {id(step): i for i, step in enumerate(steps)}

    def measured(step: Step, y: np.ndarray, skip: np.ndarray | None) -> np.ndarray:
        i = index[id(step)]
        if want[i]:
            part = _moment(step, y)
            sums[i] = part if sums[i] is None else sums[i] + part
        y = run_step(step, y, skip)
        lo[i] = min(lo[i], float(y.min()))
        hi[i] = max(hi[i], float(y.max()))
        return y

    for start in range(0, n, batch):
        run_graph(steps, np.asarray(x[start:start + batch], np.float64), measured)
    samples = [n * _positions(s) if w else 0 for s, w in zip(steps, want)]
    mom = [m / c if m is not None else None for m, c in zip(sums, samples)]
    return Calibration(list(zip(lo, hi)), mom, samples)


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
