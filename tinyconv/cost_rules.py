"""The cost rules of each op kind: the cost stage's table, :data:`OP_RULES`.

Every figure of :mod:`tinyconv.cost` that depends on an op's kind comes from
its :class:`OpRule`: parameters, state, MACs and int8 flash; the kernel's
scratch; whether the op writes a new activation buffer (a step of the
deployed network, :mod:`tinyconv.liveness`) or works in place; whether it
holds int8 weights (a batch norm right after it folds into them); and the
elements training keeps from its forward for its backward. The counting
rules themselves are stated in :mod:`tinyconv.cost`.

A new op kind adds one entry here (DEVELOPERS.md, "Where a change goes").
"""

from __future__ import annotations

from dataclasses import dataclass
from math import prod
from typing import Callable

from tinyconv.ops import Op

#: flash bytes per output channel of a weighted op: one record of int32 bias,
#: multiplier, rounding constant and shift (tinyconv.export.c_layout.channel_records)
CHANNEL_BYTES = 16
#: rows of the input lookup table (one per raw 8-bit pixel value)
INPUT_TABLE_ROWS = 256
KB = 1024


def _nothing(op: Op) -> int:
    return 0


@dataclass(frozen=True)
class OpRule:
    """What one op kind costs.

    Attributes
    ----------
    numbers : callable(Op) -> (params, state, macs, flash_bytes)
        Trained parameters, saved untrained values, multiply-accumulates per
        image and int8 deployment bytes.
    buffer : bool
        True when the op writes a new activation buffer; False when it works
        in place (its output is the tensor it read).
    weighted : bool
        True when the op holds int8 weights in flash (a batch norm directly
        after it is folded into them).
    scratch : callable(Op) -> int
        Bytes of scratch its int8 kernel needs in the activation buffer.
    cached : callable(Op) -> int
        Per-image elements a training forward keeps for the backward.
    """

    numbers: Callable[[Op], tuple[int, int, int, int]]
    buffer: bool
    weighted: bool = False
    scratch: Callable[[Op], int] = _nothing
    cached: Callable[[Op], int] = _nothing


def _conv_numbers(op: Op) -> tuple[int, int, int, int]:
    f, shape_out = op.filters, op.out_shape
    k_total = op.kernel * op.kernel * op.in_shape[2]
    weights = k_total * f
    stored = -(-k_total // 4) * 4 * f  # each filter padded to whole groups of four values
    return weights + f, 0, shape_out[0] * shape_out[1] * weights, stored + CHANNEL_BYTES * f


def _dwconv_numbers(op: Op) -> tuple[int, int, int, int]:
    c, shape_out = op.in_shape[2], op.out_shape
    weights = op.kernel * op.kernel * c
    return weights + c, 0, shape_out[0] * shape_out[1] * weights, weights + CHANNEL_BYTES * c


def _dense_numbers(op: Op) -> tuple[int, int, int, int]:
    n_in, n_out = prod(op.in_shape), prod(op.out_shape)
    weights = n_in * n_out
    return weights + n_out, 0, weights, weights + CHANNEL_BYTES * n_out


def _bn_numbers(op: Op) -> tuple[int, int, int, int]:
    c = op.in_shape[-1]
    return 2 * c, 2 * c, 0, 0


def _free(op: Op) -> tuple[int, int, int, int]:
    return 0, 0, 0, 0


def conv_scratch(op: Op) -> int:
    """A convolution copies the receptive fields of two output pixels into an
    int16 buffer (``x - zp``, padding 0, each rounded up to whole groups of four
    values with zeros) before multiplying: ``4 Kp`` bytes, ``Kp`` = ``k k c_in``
    rounded up to a multiple of 4."""
    return 4 * (-(-op.kernel * op.kernel * op.in_shape[2] // 4) * 4)


def _input(op: Op) -> int:
    return prod(op.in_shape)      # the input (max pooling: to find the winners)


def _output(op: Op) -> int:
    return prod(op.out_shape)     # the output (ReLU) or the mask (dropout)


def _bn_cached(op: Op) -> int:
    return prod(op.in_shape) + 2 * op.in_shape[-1]   # normalised input, batch mean and 1/std


#: the cost rules of every op kind (avgpool, gap, flatten and add keep only shapes)
OP_RULES: dict[str, OpRule] = {
    "conv": OpRule(_conv_numbers, buffer=True, weighted=True, scratch=conv_scratch,
                   cached=_input),
    "dwconv": OpRule(_dwconv_numbers, buffer=True, weighted=True, cached=_input),
    "dense": OpRule(_dense_numbers, buffer=True, weighted=True, cached=_input),
    "maxpool": OpRule(_free, buffer=True, cached=_input),
    "avgpool": OpRule(_free, buffer=True),
    "gap": OpRule(_free, buffer=True),
    "add": OpRule(_free, buffer=True),
    "bn": OpRule(_bn_numbers, buffer=False, cached=_bn_cached),
    "relu": OpRule(_free, buffer=False, cached=_output),
    "dropout": OpRule(_free, buffer=False, cached=_output),
    "flatten": OpRule(_free, buffer=False),
}


def rule_of(kind: str) -> OpRule:
    """The :class:`OpRule` of an op kind."""
    rule = OP_RULES.get(kind)
    if rule is None:
        raise ValueError(f"op kind {kind!r} has no cost rule; known kinds: "
                         f"{', '.join(OP_RULES)}; add its OpRule to tinyconv.cost_rules.OP_RULES")
    return rule


def writes_buffer(kind: str) -> bool:
    """Whether an op of ``kind`` writes a new activation buffer (``input``: the input
    quantisation, which does)."""
    return kind == "input" or rule_of(kind).buffer


def is_weighted(kind: str) -> bool:
    """Whether an op of ``kind`` holds int8 weights (a batch norm after it folds in)."""
    return rule_of(kind).weighted


def scratch_bytes(op: Op) -> int:
    """Bytes of scratch the int8 kernel of ``op`` needs in the activation buffer.

    A convolution copies the receptive fields of two output pixels into an
    int16 buffer (``x - zp``, padding 0) before multiplying: ``4 Kp`` bytes
    (``k k c_in`` rounded up to a multiple of 4). The other kernels loop directly.
    """
    return rule_of(op.kind).scratch(op)


def op_numbers(op: Op) -> tuple[int, int, int, int, int]:
    """(params, state, macs, out_elements, flash_bytes) of one op."""
    params, state, macs, flash = rule_of(op.kind).numbers(op)
    return params, state, macs, prod(op.out_shape), flash
