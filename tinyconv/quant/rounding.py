"""Choosing the int8 weights: nearest rounding, or rounding with error feedback.

Rounding each weight to its nearest step is optimal weight by weight, but not
for the layer's *output*: when a filter's output is a small difference of
large, correlated inputs (neighbouring pixels, colour channels) the rounding
errors add up along the inputs' common direction. Rounding with error
feedback takes the weights of one output channel in order and, after
rounding one, moves the not-yet-rounded ones to cancel the output error it
made, using the second moment ``H = E[x x^T]`` of the layer's inputs on the
calibration images (Optimal Brain Surgeon, Hassibi & Stork, NIPS 1992; its
one-pass form, Frantar et al., "GPTQ", ICLR 2023). The integers keep the
format of :mod:`tinyconv.quant.quantize` (per output channel, symmetric,
[-127, 127], same scale), so the integer reference and the C are unchanged.

Feedback is used only when the calibration gives at least
:data:`MIN_SAMPLES_PER_INPUT` samples of the layer's input per weight of a
channel (convolutions see every position of every image; a dense layer sees
one sample per image), so that ``H`` is well estimated; otherwise, and for
``method="nearest"``, weights are rounded to the nearest step.
"""

from __future__ import annotations

import numpy as np

MIN_SAMPLES_PER_INPUT = 4
DAMPING = 0.01  # added to H's diagonal, as a fraction of its mean (GPTQ's default)
METHODS = ("feedback", "nearest")


def nearest(w: np.ndarray, scale: np.ndarray) -> np.ndarray:
    """``clip(round(w / scale), -127, 127)``, channel last; int8."""
    return np.clip(np.round(w / scale), -127, 127).astype(np.int8)


def feedback_round(w: np.ndarray, scale: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Round the columns of ``w`` to steps ``scale`` with error feedback through ``h``.

    Parameters
    ----------
    w : ndarray, shape (m, f)
        Real weights: m inputs, f output channels sharing the input moments.
    scale : ndarray, shape (f,)
        Step of each output channel.
    h : ndarray, shape (m, m)
        ``E[x x^T]`` of the inputs (symmetric, positive semi-definite).

    Returns
    -------
    ndarray of int8, shape (m, f), in [-127, 127]

    Notes
    -----
    With ``U`` the upper Cholesky factor of ``(H + d I)^-1``, input ``i`` is
    rounded and its error ``e = (w_i - s q_i) / U_ii`` is spread over the later
    inputs as ``w_j -= U_ij e`` (``j > i``), which minimises the increase of
    ``E[(x (w - s q))^2]`` given the inputs already fixed (Frantar et al. 2023).
    """
    m = w.shape[0]
    h = np.asarray(h, np.float64)
    damp = DAMPING * max(float(np.mean(np.diag(h))), 1e-12)
    try:
        u = np.linalg.cholesky(np.linalg.inv(h + damp * np.eye(m))).T  # upper, U^T U = H^-1
    except np.linalg.LinAlgError:  # moments too degenerate to use: plain rounding
        return nearest(w, scale)
    if not np.all(np.isfinite(u)):
        return nearest(w, scale)
    w = np.array(w, np.float64)
    q = np.empty(w.shape, np.int8)
    for i in range(m):
        qi = np.clip(np.round(w[i] / scale), -127, 127)
        q[i] = qi
        err = (w[i] - qi * scale) / u[i, i]
        w[i + 1:] -= np.outer(u[i, i + 1:], err)
    return q


def round_weights(kind: str, w: np.ndarray, scale: np.ndarray, h: np.ndarray | None,
                  samples: int, method: str = "feedback") -> np.ndarray:
    """int8 weights of one conv, dwconv or dense layer in its own layout.

    Parameters
    ----------
    kind : {"conv", "dwconv", "dense"}
    w : ndarray
        conv ``(k, k, c_in, f)``, dwconv ``(k, k, c)``, dense ``(n_in, n_out)``.
    scale : ndarray, shape (f,)
    h : ndarray or None
        Input moments: conv and dense ``(m, m)`` with ``m`` the fan-in (in the
        order of ``w.reshape(m, f)``); dwconv ``(c, k*k, k*k)``, one per channel.
    samples : int
        Input samples behind ``h``.
    method : {"feedback", "nearest"}
    """
    if method not in METHODS:
        raise ValueError(f"rounding method {method!r}: expected one of {', '.join(METHODS)}")
    fan_in = int(np.prod(w.shape[:-1])) if kind != "dwconv" else w.shape[0] * w.shape[1]
    if method == "nearest" or h is None or samples < MIN_SAMPLES_PER_INPUT * fan_in:
        return nearest(w, scale)
    if kind == "dwconv":
        k, _, c = w.shape
        out = np.empty(w.shape, np.int8)
        for ch in range(c):  # each channel reads its own input
            out[:, :, ch] = feedback_round(w[:, :, ch].reshape(k * k, 1), scale[ch:ch + 1],
                                           h[ch]).reshape(k, k)
        return out
    return feedback_round(w.reshape(fan_in, -1), scale, h).reshape(w.shape)
