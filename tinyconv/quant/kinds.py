"""The int8 stage's table: how each op kind is deployed, :data:`STEP_KINDS`.

One :class:`StepKind` per op kind says how the op folds into the steps a
device runs (:func:`tinyconv.quant.fold.build_steps`), and, for a kind that is
a step of its own, its float64 reference (what calibration measures,
:mod:`tinyconv.quant.floatref`), its quantisation (:func:`tinyconv.quant.quantize.quantize_steps`)
and its integer reference (what the C must match bit for bit,
:mod:`tinyconv.quant.integer`). A new op kind adds one entry here
(DEVELOPERS.md, "Where a change goes").
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from tinyconv.quant import floatref, integer
from tinyconv.quant.fold import BATCH_NORM, IDENTITY, RELU, STEP, WEIGHTED, Step
from tinyconv.quant.quantize import (QuantLayer, StepGrid, add_step, same_grid_step,
                                     weighted_step)


@dataclass(frozen=True)
class StepKind:
    """How one op kind is deployed.

    Attributes
    ----------
    fold : str
        ``weighted`` (a step with weights ``w``, ``b``; batch norm and ReLU fold
        into it), ``step`` (a step without weights), ``batch_norm``, ``relu`` or
        ``identity`` (nothing at inference): the roles of :mod:`tinyconv.quant.fold`.
    run_float : callable(Step, x, skip) -> ndarray, or None
        A step's float64 output before its ReLU (``skip``: a second input).
    quantize : callable(Step, StepGrid) -> QuantLayer, or None
        The step's int8 form on the grids of :class:`~tinyconv.quant.quantize.StepGrid`.
    run_int : callable(QuantLayer, x, skip) -> ndarray of int8, or None
        The step's integer reference.
    """

    fold: str
    run_float: Callable[[Step, np.ndarray, np.ndarray | None], np.ndarray] | None = None
    quantize: Callable[[Step, StepGrid], QuantLayer] | None = None
    run_int: Callable[[QuantLayer, np.ndarray, np.ndarray | None], np.ndarray] | None = None


#: the int8 stage's entry of every op kind
STEP_KINDS: dict[str, StepKind] = {
    "conv": StepKind(WEIGHTED, floatref.conv, weighted_step, integer.weighted),
    "dwconv": StepKind(WEIGHTED, floatref.dwconv, weighted_step, integer.weighted),
    "dense": StepKind(WEIGHTED, floatref.dense, weighted_step, integer.weighted),
    "maxpool": StepKind(STEP, floatref.maxpool, same_grid_step, integer.maxpool),
    "avgpool": StepKind(STEP, floatref.avgpool, same_grid_step, integer.avgpool),
    "gap": StepKind(STEP, floatref.gap, same_grid_step, integer.gap),
    "add": StepKind(STEP, floatref.add, add_step, integer.add),
    "bn": StepKind(BATCH_NORM),
    "relu": StepKind(RELU),
    "dropout": StepKind(IDENTITY),
    "flatten": StepKind(IDENTITY),
}


def step_kind(kind: str) -> StepKind:
    """The :class:`StepKind` of an op kind."""
    entry = STEP_KINDS.get(kind)
    if entry is None:
        raise ValueError(f"unknown kind {kind!r}: it has no int8 form; known kinds: "
                         f"{', '.join(STEP_KINDS)}; add its StepKind to "
                         "tinyconv.quant.kinds.STEP_KINDS")
    return entry
