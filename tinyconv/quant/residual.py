"""The residual addition in integers: two int8 tensors on their own grids, one out.

The real sum is ``S_a (q_a - Z_a) + S_b (q_b - Z_b)``; on the output grid it is
``Z_y + (S_a d_a + S_b d_b) / S_y`` with ``d = q - Z``. Following Jacob et al.
("Quantization and Training of Neural Networks for Efficient
Integer-Arithmetic-Only Inference", CVPR 2018, section 2.3 and appendix), both
terms are first brought to one common scale with fixed-point multipliers, then
added, then requantised with a third multiplier:

1. ``t_a = rescale(d_a 2^ADD_BITS, S_a / (2 m))`` and likewise ``t_b``, with
   ``m = max(S_a, S_b)``: both multipliers are at most 1/2, so the terms keep
   ``ADD_BITS`` bits of fraction below the coarser grid's step and no left
   shift is ever needed;
2. ``y = Z_y + rescale(t_a + t_b, 2 m / (2^ADD_BITS S_y))``, clamped to int8.

``rescale`` is the rounding doubling high multiply and rounding right shift of
:mod:`tinyconv.quant.fixed_point` (the C's ``_scale``), so the C matches this
bit for bit. Ranges: ``|d| <= 255 < 2^8``, so ``|d| 2^20 < 2^28`` and the sum of
the two rescaled terms stays below ``2^28``: int32 throughout.
"""

from __future__ import annotations

import numpy as np

from tinyconv.quant.calibrate import QMAX, QMIN
from tinyconv.quant.fixed_point import multiply_by_quantized_multiplier, quantize_multiplier

#: fraction bits kept below the coarser input grid while the two terms are summed
ADD_BITS = 20


def add_multipliers(s_a: float, s_b: float, s_y: float) -> tuple[np.ndarray, np.ndarray]:
    """The three fixed-point multipliers and shifts of an addition.

    Parameters
    ----------
    s_a, s_b : float
        Scales of the two inputs (the block's last output, the block's input).
    s_y : float
        Scale of the output.

    Returns
    -------
    mult, shift : ndarray of int32, shape (3,)
        For ``t_a``, ``t_b`` and the output, as :func:`quantize_multiplier` gives them.
    """
    for name, value in (("input a", s_a), ("input b", s_b), ("output", s_y)):
        if not (np.isfinite(value) and value > 0):
            raise ValueError(f"residual addition: the {name} scale must be finite and > 0, "
                             f"got {value!r}")
    twice = 2.0 * max(s_a, s_b)
    pairs = [quantize_multiplier(v) for v in (s_a / twice, s_b / twice,
                                              twice / (2.0 ** ADD_BITS * s_y))]
    return (np.array([m for m, _ in pairs], np.int32), np.array([n for _, n in pairs], np.int32))


def add_integer(a: np.ndarray, z_a: int, b: np.ndarray, z_b: int, mult: np.ndarray,
                shift: np.ndarray, z_y: int) -> np.ndarray:
    """The int8 sum of two int8 tensors of one shape, with integers only.

    Parameters
    ----------
    a, b : ndarray of int8
        The two inputs (same shape), zero points ``z_a`` and ``z_b``.
    mult, shift : ndarray of int32, shape (3,)
        From :func:`add_multipliers`.
    z_y : int
        Output zero point.

    Returns
    -------
    ndarray of int8, the shape of ``a``
    """
    flat_a = (a.astype(np.int64).reshape(-1, 1) - z_a) << ADD_BITS
    flat_b = (b.astype(np.int64).reshape(-1, 1) - z_b) << ADD_BITS
    t_a = multiply_by_quantized_multiplier(flat_a, mult[0], shift[0])
    t_b = multiply_by_quantized_multiplier(flat_b, mult[1], shift[1])
    y = multiply_by_quantized_multiplier(t_a + t_b, mult[2], shift[2]) + z_y
    return np.clip(y, QMIN, QMAX).astype(np.int8).reshape(a.shape)
