"""Memory of one training step: :func:`training_memory` and :class:`TrainingMemory`."""

from __future__ import annotations

from dataclasses import dataclass
from math import prod
from typing import Union

from tinyconv.arch import Arch, Op, expand
from tinyconv.cost_network import cost_of
from tinyconv.cost_rules import rule_of
from tinyconv.cost_totals import _as_arch
from tinyconv.errors import InputError

#: optimiser state buffers per parameter
OPTIMIZER_SLOTS = {"adam": 2, "sgd": 1}


@dataclass(frozen=True)
class TrainingMemory:
    """Bytes a training step holds for one batch (float32 unless told).

    Attributes
    ----------
    batch_size : int
    cached_bytes : int
        Activations kept by the forward pass for the backward pass.
    gradient_bytes : int
        The largest pair of activation gradients alive at once in the backward
        pass (gradient into an op + gradient out of it).
    params_bytes, grads_bytes, optimizer_bytes, state_bytes : int
        Parameters, their gradients, optimiser buffers and batch-norm state.
    total_bytes : int
        The sum of the above.
    """

    batch_size: int
    optimizer: str
    cached_bytes: int
    gradient_bytes: int
    params_bytes: int
    grads_bytes: int
    optimizer_bytes: int
    state_bytes: int
    total_bytes: int


def _cached_elements(op: Op) -> int:
    """Per-image elements ``op`` keeps from forward for backward (its kind's rule)."""
    return rule_of(op.kind).cached(op)


def training_memory(arch: Union[Arch, str], n_classes: int, batch_size: int,
                    optimizer: str = "adam", momentum: float = 0.9,
                    item_bytes: int = 4) -> TrainingMemory:
    """Memory of one training step of a batch, in bytes.

    Parameters
    ----------
    arch : Arch or str
    n_classes : int
    batch_size : int
        Images per step (>= 1).
    optimizer : {"adam", "sgd"}
        Adam keeps two buffers per parameter; SGD one (none when ``momentum``
        is 0).
    momentum : float
        SGD momentum.
    item_bytes : int
        Bytes per number: 4 for float32, 8 for float64.

    Notes
    -----
    Counted: activations cached for backward, per image — the input of every
    conv, dwconv, dense and max pooling; the output of every ReLU; the mask of
    every dropout; the normalised input and the batch statistics of every batch
    norm; and the class probabilities of the loss — times the batch; the
    largest input + output gradient pair of any op, times the batch; the
    parameters, their gradients and the optimiser buffers; batch-norm state.
    Not counted: the training images themselves, scratch a convolution kernel
    may allocate (such as an im2col matrix) and interpreter overhead, which
    depend on the engine rather than the network.
    """
    if optimizer not in OPTIMIZER_SLOTS:
        raise InputError(f"optimizer {optimizer!r} is not one of "
                         f"{', '.join(OPTIMIZER_SLOTS)}; pick one of them")
    if isinstance(batch_size, bool) or not isinstance(batch_size, int) or batch_size < 1:
        raise InputError(f"batch size must be a positive integer, got {batch_size!r}")
    arch = _as_arch(arch)
    ops = expand(arch, n_classes)
    cost = cost_of(arch, n_classes)
    cached = sum(_cached_elements(op) for op in ops) + n_classes
    grad_pair = max(prod(op.in_shape) + prod(op.out_shape) for op in ops)
    slots = OPTIMIZER_SLOTS[optimizer] if (optimizer != "sgd" or momentum) else 0
    b = item_bytes
    parts = dict(cached_bytes=cached * batch_size * b,
                 gradient_bytes=grad_pair * batch_size * b,
                 params_bytes=cost.params * b, grads_bytes=cost.params * b,
                 optimizer_bytes=slots * cost.params * b, state_bytes=cost.state * b)
    return TrainingMemory(batch_size, optimizer, total_bytes=sum(parts.values()), **parts)

