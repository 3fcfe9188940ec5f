"""Fixed-point requantisation: a real multiplier as an int32 and a shift.

An int8 layer accumulates ``acc = sum (q_in - Z_in) q_w + bias`` in int32 and
must scale it by the real ``M = S_in S_w / S_out`` to land on the output
grid. Following Jacob et al. ("Quantization and Training of Neural Networks
for Efficient Integer-Arithmetic-Only Inference", CVPR 2018), ``M`` is written
as ``M0 2^-n`` with ``M0`` in ``[0.5, 1)``, ``M0`` is stored as the int32
``round(M0 2^31)``, and ``acc M`` is computed with integers only:

1. a *rounding doubling high multiply*: ``round(acc m / 2^31)`` with the
   rounding nudge of half a unit away from zero (the product is formed in
   64 bits, then divided with truncation toward zero);
2. a *rounding right shift* by ``n``: division by ``2^n`` rounding half away
   from zero.

A negative ``n`` (only when ``M >= 1``, which calibrated layers almost never
need) is a saturating left shift before step 1.

Every function here works elementwise on NumPy integer arrays (int64
internally) and is mirrored line for line by the C in
:mod:`tinyconv.export.c_writer`, so the two agree bit for bit.
"""

from __future__ import annotations

import math

import numpy as np

INT32_MIN = -(2 ** 31)
INT32_MAX = 2 ** 31 - 1
MAX_LEFT_SHIFT = 30


def quantize_multiplier(m: float) -> tuple[int, int]:
    """Split a real multiplier ``m >= 0`` into ``(m0, n)`` with ``m ~ m0 2^-31 2^-n``.

    Parameters
    ----------
    m : float
        The real multiplier, e.g. ``S_in * S_w / S_out``; finite and >= 0.

    Returns
    -------
    m0 : int
        ``round(M0 * 2^31)`` with ``M0`` in [0.5, 1), so ``m0`` is in
        [2^30, 2^31 - 1]; 0 when ``m`` is 0 or too small to matter.
    n : int
        The right shift (negative for a left shift when ``m >= 1``).

    Notes
    -----
    When the rounding of ``M0 2^31`` reaches ``2^31`` the pair becomes
    ``(2^30, n - 1)``. A multiplier below ``2^-32`` maps every int32
    accumulator to 0 after rounding, so it is stored as ``(0, 0)``, which gives
    exactly that.
    """
    if not math.isfinite(m) or m < 0:
        raise ValueError(f"multiplier must be finite and >= 0, got {m!r}")
    if m == 0.0:
        return 0, 0
    frac, exp = math.frexp(m)  # m = frac * 2**exp, frac in [0.5, 1)
    m0 = int(round(frac * 2 ** 31))
    if m0 == 2 ** 31:
        m0 //= 2
        exp += 1
    n = -exp
    if n > 31:
        return 0, 0
    if n < -MAX_LEFT_SHIFT:
        raise ValueError(f"multiplier {m!r} is too large for a left shift of at most "
                         f"{MAX_LEFT_SHIFT} bits")
    return m0, n


def saturating_left_shift(x: np.ndarray, n: int) -> np.ndarray:
    """``x * 2^n`` saturated to the int32 range (``n >= 0``)."""
    x = np.asarray(x, dtype=np.int64)
    return np.clip(x * (1 << n), INT32_MIN, INT32_MAX)


def rounding_doubling_high_mul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``round(a b / 2^31)``, half away from zero, for int32 ``a`` and ``b``.

    Parameters
    ----------
    a, b : array_like of int
        int32 values (broadcast together).

    Returns
    -------
    ndarray of int64
        The high 32 bits of the doubled product, rounded; the one overflow
        case ``a = b = -2^31`` saturates to ``2^31 - 1``.
    """
    a = np.asarray(a, dtype=np.int64)
    b = np.asarray(b, dtype=np.int64)
    ab = a * b
    nudge = np.where(ab >= 0, 1 << 30, 1 - (1 << 30))
    total = ab + nudge
    # division by 2^31 truncating toward zero, as C99 integer division does
    q = np.sign(total) * (np.abs(total) >> 31)
    return np.where((a == INT32_MIN) & (b == INT32_MIN), INT32_MAX, q)


def rounding_right_shift(x: np.ndarray, n: int) -> np.ndarray:
    """``x / 2^n`` rounded half away from zero (``0 <= n <= 62``).

    Written on the magnitude, ``sign(x) ((|x| + 2^(n-1)) >> n)``, so that the C
    version needs no right shift of a negative number (which C99 leaves to
    the implementation).
    """
    x = np.asarray(x, dtype=np.int64)
    if n == 0:
        return x
    half = np.int64(1) << (n - 1)
    return np.sign(x) * ((np.abs(x) + half) >> n)


def multiply_by_quantized_multiplier(acc: np.ndarray, m0, n) -> np.ndarray:
    """``acc * m0 2^-31 2^-n`` with integers only.

    Parameters
    ----------
    acc : array_like of int
        int32 accumulators, shape (..., f).
    m0, n : int or array_like of int, shape (f,)
        Per-channel multipliers and shifts from :func:`quantize_multiplier`.

    Returns
    -------
    ndarray of int64, the shape of ``acc``.
    """
    acc = np.asarray(acc, dtype=np.int64)
    m0 = np.broadcast_to(np.asarray(m0, dtype=np.int64), acc.shape[-1:] if acc.ndim else ())
    n = np.broadcast_to(np.asarray(n, dtype=np.int64), m0.shape)
    out = np.empty(acc.shape, dtype=np.int64)
    if acc.ndim == 0:
        return _one(acc, int(m0), int(n))
    for shift in np.unique(n):
        cols = np.nonzero(n == shift)[0]
        out[..., cols] = _one(acc[..., cols], m0[cols], int(shift))
    return out


def _one(acc: np.ndarray, m0, n: int) -> np.ndarray:
    """One shift value: optional left shift, high multiply, right shift."""
    if n < 0:
        acc = saturating_left_shift(acc, -n)
        n = 0
    return rounding_right_shift(rounding_doubling_high_mul(acc, m0), n)
