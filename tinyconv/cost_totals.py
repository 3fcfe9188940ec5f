"""The budget figures of many candidates, cheaply: :func:`totals_of` and :class:`Totals`.

The same numbers as the totals of :func:`tinyconv.cost.cost_of`, without its
per-op rows, with the figures of a layer met twice summed once.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Union

from tinyconv.arch import (Arch, BatchNorm, Conv, Dense, Depthwise, check_classes, expand_head,
                           expand_layer, parse, token_count)
from tinyconv.cost_rules import INPUT_TABLE_ROWS, KB, is_weighted, op_numbers, rule_of, scratch_bytes
from tinyconv.liveness import live_ranges


class BudgetFigures:
    """The budget figures in KB, shared by :class:`Totals` and :class:`tinyconv.cost.Cost`
    (both have ``flash_bytes`` and ``peak_int8_bytes``)."""

    @property
    def flash_kb(self) -> float:
        return self.flash_bytes / KB

    @property
    def peak_kb(self) -> float:
        """int8 peak activation memory in KB (1,024 bytes)."""
        return self.peak_int8_bytes / KB


def _as_arch(arch: Union[Arch, str]) -> Arch:
    return parse(arch) if isinstance(arch, str) else arch


@dataclass(frozen=True)
class Totals(BudgetFigures):
    """The budget figures of one candidate, without per-op rows (cheap to keep).

    Same numbers as the matching fields of :class:`Cost`; ``ms`` is the device
    model's milliseconds per image when a budget names a core (else None).
    """

    arch: str
    n_classes: int
    params: int
    macs: int
    flash_bytes: int
    peak_int8_bytes: int
    exportable: bool
    ms: float | None = None


def totals_of(arch: Union[Arch, str], n_classes: int, cache: dict | None = None) -> Totals:
    """The totals of :func:`cost_of` without building its rows (for filtering many).

    Parameters
    ----------
    arch : Arch or str
    n_classes : int
    cache : dict, optional
        Reused between calls on many candidates (e.g. a whole space): one
        layer meeting the same map after the same kind of layer yields the same
        ops, so their figures are summed once. Keep one dict per batch of work.

    Notes
    -----
    Same ops (:func:`tinyconv.arch.expand_layer`, the steps of ``expand``) and
    the same per-op rule as :func:`cost_of`; a test checks that they agree.
    """
    arch = _as_arch(arch)
    check_classes(n_classes)
    cache = {} if cache is None else cache
    shape = arch.input.shape
    params, macs = 0, 0
    flash, peak = INPUT_TABLE_ROWS * shape[2], shape[0] * shape[1] * shape[2]
    exportable = True
    layers = arch.layers
    prev = None
    pos = 1
    for i, layer in enumerate(layers):
        follows_bn = i + 1 < len(layers) and type(layers[i + 1]) is BatchNorm
        after_weights = isinstance(prev, _WEIGHTED_SPECS)
        key = (layer, shape, after_weights, follows_bn)
        hit = cache.get(key)
        if hit is None:
            ops, out = expand_layer(layer, shape, pos, prev, follows_bn,
                                    lambda: str(arch))
            hit = _summed(ops, shape) + (_exportable(ops, after_weights), out)
            cache[key] = hit
        params += hit[0]
        macs += hit[1]
        flash += hit[2]
        peak = max(peak, hit[3])
        exportable = exportable and hit[4]
        shape = hit[5]
        prev = layer
        pos += token_count(layer)
    key = ("head", shape, n_classes)
    hit = cache.get(key)
    if hit is None:
        hit = cache[key] = _summed(expand_head(shape, n_classes), shape)
    return Totals(str(arch), n_classes, params + hit[0], macs + hit[1], flash + hit[2],
                  max(peak, hit[3]), exportable)


_WEIGHTED_SPECS = (Conv, Depthwise, Dense)


def _summed(ops, in_shape: tuple[int, ...]) -> tuple[int, int, int, int]:
    """(params, macs, flash_bytes, largest int8 live bytes) over the ops of one layer.

    The layer's input counts as written before its first op: the tensors alive
    at a step inside a layer are those of the layer's own walk (a residual
    block's input is the layer's input; nothing written earlier outlives it).
    """
    lives = live_ranges(ops, in_shape)
    params = macs = flash = peak = 0
    for i, op in enumerate(ops):
        p, _, m, _, f = op_numbers(op)
        if rule_of(op.kind).buffer:
            peak = max(peak, lives.elements(lives.alive[i]) + scratch_bytes(op))
        params, macs, flash = params + p, macs + m, flash + f
    return params, macs, flash, peak


def _exportable(ops, after_weights: bool) -> bool:
    """Whether every batch norm of one layer's ops can be folded (directly after a
    weighted op; the layer's first op after the previous layer's weights)."""
    return all(i > 0 and is_weighted(ops[i - 1].kind) if i else after_weights
               for i, op in enumerate(ops) if op.kind == "bn")

