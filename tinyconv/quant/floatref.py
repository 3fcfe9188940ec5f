"""Float64 inference of folded :class:`~tinyconv.quant.fold.Step` s.

This is what calibration measures and what the batch-norm folding test
compares with the network's own forward pass: a plain, obviously right
NumPy reference (patches times weights), not a fast kernel.
"""

from __future__ import annotations

import numpy as np

from tinyconv.quant.fold import Step, run_graph
from tinyconv.quant.patches import conv_patches, pool_windows


def run_step(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    """Apply one step to a batch.

    Parameters
    ----------
    x : ndarray, shape (n, *step.op.in_shape)
        float input; a flat (n, features) input reaches a dense step, a map
        otherwise (a flatten before dense is done here, in NHWC order).
    skip : ndarray, optional
        For an ``add``: the block's input, added to ``x``.

    Returns
    -------
    ndarray of float64, shape (n, *step.op.out_shape)
    """
    x = np.asarray(x, np.float64)
    from tinyconv.quant.kinds import step_kind  # the table imports this module: read at call time
    y = step_kind(step.kind).run_float(step, x, skip)
    if step.relu:
        y = np.maximum(y, 0.0)
    return y


def run_steps(steps: tuple[Step, ...], x: np.ndarray, keep: bool = False):
    """Run all steps; the logits, or every step's output when ``keep``.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
        The normalised float input.

    Returns
    -------
    ndarray, shape (n, K), or list of ndarray (one per step) when ``keep``.
    """
    return run_graph(steps, x, run_step, keep)


# ------------------------------------------------- the float64 step of each built-in kind


def conv(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    cols = conv_patches(x, step.op)  # (n, oh, ow, k, k, c)
    k, c = step.op.kernel, x.shape[3]
    # (n, oh, ow, k*k*c) @ (k*k*c, f)
    return cols.reshape(*cols.shape[:3], k * k * c) @ step.w.reshape(k * k * c, -1) + step.b


def dwconv(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    cols = conv_patches(x, step.op)
    return np.einsum("nyxijc,ijc->nyxc", cols, step.w, optimize=True) + step.b


def dense(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    n = x.shape[0]
    return x.reshape(n, -1) @ step.w + step.b


def maxpool(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    return pool_windows(x, step.op.size).max(axis=3)


def avgpool(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    return pool_windows(x, step.op.size).mean(axis=3)


def gap(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    return x.mean(axis=(1, 2))


def add(step: Step, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    return x + np.asarray(skip, np.float64).reshape(x.shape)
