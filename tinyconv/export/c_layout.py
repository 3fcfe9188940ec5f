"""What the fast C kernels read: weights in their order, biases with the zero point
folded in, and the scratch each step needs. Pure functions of a quantised layer.

* conv weights ``[f][k][k][c]`` flattened to ``[f][K]``, padded with zeros to
  whole groups of four (``Kp``, :func:`padded_k`), filters interleaved in pairs group by group of four values (:func:`pair_filters`) so the kernel
  walks one pointer; a 32-bit load of a group gives the pairs (0, 2) and
  (1, 3) through the DSP extension's ``SXTB16`` of the word and of the word
  rotated by 8, which is why the patch stores each group as (0, 2, 1, 3)
  (:mod:`tinyconv.export.c_fast_conv`); the patch holds ``x - zp``, so the
  conv bias is unchanged;
* dense and head weights ``[n_out][n_in]`` in order, bias ``b - zp * sum_i w``;
* per output channel one record ``[bias, multiplier, nh, code]`` (:func:`channel_records`);
* depthwise weights ``[k][k][c]``, bias ``b - zp * sum over the window of w``;
* conv scratch: two patches of ``Kp`` int16 values, ``4 Kp`` bytes,
  inside the one activation buffer (see :func:`tinyconv.cost.scratch_bytes`).
"""

from __future__ import annotations

import numpy as np

from tinyconv.errors import InputError
from tinyconv.quant.quantize import QuantLayer

INT32_MAX = 2 ** 31 - 1
#: largest |x * w| of one int8 product
MAX_PRODUCT = 128 * 128
def padded_k(k_total: int) -> int:
    """``K`` rounded up to whole groups of four: the fast convolution's row length
    (its weights and patches carry zeros after the last value)."""
    return -(-k_total // 4) * 4


def pair_filters(rows: np.ndarray) -> np.ndarray:
    """Rows ``[f][K]`` laid out for the fast conv kernel.

    Each row is first padded with zeros to :func:`padded_k` values (``Kp``).
    Per pair of filters: group by group, the four values of the first then the
    four of the second; a last odd filter keeps its own row. The result is flat,
    ``f Kp`` values, so each pair starts at ``o * Kp``.
    """
    f, k = rows.shape
    kp = padded_k(k)
    rows = np.concatenate([rows, np.zeros((f, kp - k), rows.dtype)], axis=1)
    parts = []
    for o in range(0, f - 1, 2):
        groups = np.stack([rows[o].reshape(-1, 4), rows[o + 1].reshape(-1, 4)], axis=1)
        parts.append(groups.reshape(-1))
    if f % 2:
        parts.append(rows[-1])
    return np.concatenate(parts) if parts else rows.reshape(-1)


def weights(layer: QuantLayer, style: str) -> np.ndarray:
    """The weights in the order the kernels of ``style`` read them.

    The fast kernels clamp every output at 127 (the quantiser's upper clamp
    for every layer); a layer with another upper clamp is refused.
    """
    if style == "fast" and layer.hi != 127:
        raise ValueError(f"layer {layer.kind} clamps its outputs at {layer.hi}; the fast C "
                         "kernels clamp at 127; export it with style='plain'")
    w = layer.weights
    if layer.kind == "conv":
        rows = w.transpose(3, 0, 1, 2).reshape(w.shape[3], -1)  # (k, k, c, f) -> [f][K]
        return pair_filters(rows) if style == "fast" else rows
    if layer.kind == "dense":
        return w.T  # (n_in, n_out) -> [n_out][n_in]
    return w  # dwconv (k, k, c), read as [k][k][c]


def bias(layer: QuantLayer, style: str) -> np.ndarray:
    """The int32 bias the kernels of ``style`` start from.

    Raises
    ------
    InputError
        When folding the zero point would let an int32 sum overflow (a layer far
        wider than any network of this tool: the message names it).
    """
    b = np.asarray(layer.bias, np.int64)
    if style != "fast" or layer.kind == "conv":
        return b
    w = np.asarray(layer.weights, np.int64)
    if layer.kind == "dense":
        sums, fan_in = w.sum(axis=0), w.shape[0]           # (n_in, n_out) -> per output
    else:
        sums, fan_in = w.sum(axis=(0, 1)), w.shape[0] * w.shape[1]  # (k, k, c) -> per channel
    folded = b - layer.in_zp * sums
    if np.abs(folded).max(initial=0) + MAX_PRODUCT * fan_in > INT32_MAX:
        raise InputError(f"layer {layer.op.name}: {fan_in} inputs per output are too many "
                         "for int32 sums with the zero point folded in; use fewer inputs "
                         "per output (a global pooling before the dense layer)")
    return folded


#: the shifts the one-product requantisation takes (``_rq1``): 2..23
ONE_PRODUCT_SHIFTS = range(2, 24)
#: a record's code for the general form: the shift plus this (codes 23 and up)
RARE_CODE_OFFSET = 64


def channel_records(layer: QuantLayer) -> np.ndarray:
    """The fast kernels' per-channel records, ``[bias, multiplier, nh, code]`` per
    output channel, flat (16 bytes a channel), so that one pointer walks them.

    ``code`` is ``shift - 1`` (1..22) for a channel the one-product
    requantisation takes (``_rq1``: a shift in 2..23 and the layer's lower clamp
    -128, which it saturates to), and ``nh`` its rounding constant's high word,
    ``(2 zp + 1) 2^(shift - 2)`` with ``zp`` the output zero point, worked out
    here instead of per output. Any other channel (a rare shift, or every channel
    of a layer whose lower clamp is above -128: a ReLU whose output zero point is
    above -128) takes the general form (``_rq_rare``): ``code`` is the shift plus
    :data:`RARE_CODE_OFFSET` and ``nh`` is 0.

    Returns
    -------
    ndarray of int64, shape (4 f,)

    Raises
    ------
    ValueError
        For a shift below ``22 - RARE_CODE_OFFSET`` (a rescaling by more than
        2^41, which no quantised layer of this tool has).
    """
    b = bias(layer, "fast")
    m = np.asarray(layer.multiplier, np.int64).reshape(-1)
    n = np.asarray(layer.shift, np.int64).reshape(-1)
    if n.size and n.min() <= 22 - RARE_CODE_OFFSET:
        raise ValueError(f"layer {layer.op.name}: shift {n.min()} is below "
                         f"{23 - RARE_CODE_OFFSET}; export it with style='plain'")
    fast = (n >= ONE_PRODUCT_SHIFTS.start) & (n < ONE_PRODUCT_SHIFTS.stop) & (layer.lo == -128)
    nh = np.where(fast, (2 * int(layer.out_zp) + 1) * 2 ** np.clip(n - 2, 0, 21), 0)
    code = np.where(fast, n - 1, n + RARE_CODE_OFFSET)
    return np.stack([b, m, nh, code], axis=1).reshape(-1)


def check_multipliers(layer: QuantLayer) -> None:
    """The fast requantisation needs multipliers in [0, 2^31) (the quantiser's)."""
    m = np.asarray(layer.multiplier, np.int64)
    if m.size and (m.min() < 0 or m.max() > INT32_MAX):
        raise ValueError(f"layer {layer.op.name}: multiplier outside [0, 2^31): "
                         f"{m.min()}..{m.max()}")
