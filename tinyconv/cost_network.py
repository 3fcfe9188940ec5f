"""The cost of one network, row by row: :func:`cost_of` and its :class:`Cost`.

One :class:`OpCost` per :class:`~tinyconv.arch.Op` of :func:`tinyconv.arch.expand`,
plus one for the input quantisation; the per-kind figures come from
:data:`tinyconv.cost_rules.OP_RULES`, the counting rules are in :mod:`tinyconv.cost`.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from math import prod
from typing import TYPE_CHECKING, Union

if TYPE_CHECKING:
    import pandas as pd


from tinyconv.arch import Arch, Op, expand
from tinyconv.cost_rules import INPUT_TABLE_ROWS, is_weighted, op_numbers, rule_of, scratch_bytes
from tinyconv.cost_totals import BudgetFigures, _as_arch
from tinyconv.liveness import Lives, live_ranges


@dataclass(frozen=True)
class OpCost:
    """The cost of one operation (or of the input quantisation, ``kind='input'``).

    Attributes
    ----------
    index : int
        Index into ``expand(arch, n_classes)``; -1 for the input row.
    name, kind : str
        ``Op.name`` (e.g. ``"3:c16k3"``, ``"head:dense"``) and ``Op.kind``.
    in_shape, out_shape : tuple of int
        Per-image shapes, (h, w, c) or (n_features,).
    params : int
        Trained parameters.
    state : int
        Saved but untrained values (batch norm's running mean and variance).
    macs : int
        Multiply-accumulates per image.
    out_elements : int
        Elements of the output activation of one image.
    flash_bytes : int
        int8 deployment bytes of this op (0 for folded batch norm).
    live_elements : int
        Elements of every tensor alive while the op runs, when it writes a new
        buffer (its input(s), its output, and a residual block's input held
        for the addition); 0 for in-place ops.
    folded : bool
        True for a batch norm folded into the conv/dwconv/dense before it.
    scratch_bytes : int
        Scratch the int8 kernel needs beside its input and output
        (:func:`scratch_bytes`); counted in the int8 peak, not in float32.
    alive : tuple of str
        The tensors behind ``live_elements``, each named by the step that
        wrote it (``input``, ``3:c48k1``, ...); empty for in-place ops.
    """

    index: int
    name: str
    kind: str
    in_shape: tuple[int, ...]
    out_shape: tuple[int, ...]
    params: int
    state: int
    macs: int
    out_elements: int
    flash_bytes: int
    live_elements: int
    folded: bool = False
    scratch_bytes: int = 0
    alive: tuple[str, ...] = ()


@dataclass(frozen=True)
class Cost(BudgetFigures):
    """Totals for one architecture and number of classes, with the per-op rows.

    ``rows[0]`` is the input quantisation; ``rows[i + 1]`` costs
    ``expand(arch, n_classes)[i]``.

    Attributes
    ----------
    arch : str
        The architecture text.
    n_classes : int
    rows : tuple of OpCost
    params, state, macs, flash_bytes : int
        Sums over the rows.
    peak_elements : int
        Largest ``live_elements`` of any row.
    peak_int8_bytes : int
        Largest ``live_elements + scratch_bytes`` of any row: the one static
        buffer of the generated C.
    peak_float32_bytes : int
        ``peak_elements`` x 4.
    peak_op : str
        Name of the row where the int8 peak occurs (the first, on ties).
    exportable : bool
        False when a batch norm does not directly follow conv/dwconv/dense (the
        int8 exporter refuses it; its flash is then not known and counted 0).
    """

    arch: str
    n_classes: int
    rows: tuple[OpCost, ...]
    params: int
    state: int
    macs: int
    flash_bytes: int
    peak_elements: int
    peak_int8_bytes: int
    peak_float32_bytes: int
    peak_op: str
    exportable: bool

    def totals(self) -> dict:
        """The totals as a plain dict (no rows)."""
        return {k: v for k, v in asdict(self).items() if k != "rows"}

    def records(self) -> list[dict]:
        """One plain dict per :class:`OpCost` (the input first); shapes as ``8x8x16``
        text, the tensors alive as ``input + 1:c8k3``."""
        records = []
        for row in self.rows:
            rec = asdict(row)
            rec["in_shape"] = "x".join(map(str, row.in_shape))
            rec["out_shape"] = "x".join(map(str, row.out_shape))
            rec["alive"] = " + ".join(row.alive)
            records.append(rec)
        return records

    def table(self) -> "pd.DataFrame":
        """:meth:`records` as a DataFrame (pandas is imported only here: the cost
        command and the budget filter need none of it)."""
        import pandas as pd
        return pd.DataFrame.from_records(self.records(),
                                         columns=list(OpCost.__dataclass_fields__))

    def as_dict(self) -> dict:
        """Totals and rows as JSON-ready data."""
        out = self.totals()
        out["rows"] = [asdict(r) for r in self.rows]
        return out


def op_cost(op: Op, index: int, folded: bool = False, lives: Lives | None = None) -> OpCost:
    """The cost of one :class:`~tinyconv.arch.Op`.

    Parameters
    ----------
    op : Op
    index : int
        Its index in ``expand()``.
    folded : bool
        For a batch norm: whether it is folded into the op before it.
    lives : Lives, optional
        The live ranges of the whole network (:func:`tinyconv.liveness.live_ranges`),
        which give the tensors alive during the op; without them, a buffer
        op counts its input and output alone (the rule of a plain chain).
    """
    if lives is not None:
        alive = lives.alive[index]
        live, names = lives.elements(alive), tuple(lives.tensors[t].name for t in alive)
    else:
        live = prod(op.in_shape) + prod(op.out_shape) if rule_of(op.kind).buffer else 0
        names = ()
    return OpCost(index, op.name, op.kind, op.in_shape, op.out_shape, *op_numbers(op),
                  live_elements=live, folded=folded, scratch_bytes=scratch_bytes(op),
                  alive=names)


def input_cost(arch: Arch) -> OpCost:
    """The input quantisation: a ``256*c`` int8 table; raw pixels in (the caller's
    buffer), int8 out (the activation buffer)."""
    shape = arch.input.shape
    n = prod(shape)
    return OpCost(-1, "input", "input", shape, shape, 0, 0, 0, n,
                  INPUT_TABLE_ROWS * shape[2], n, alive=("input",))


def folded_flags(ops: tuple[Op, ...]) -> tuple[bool, ...]:
    """Per op: True for a batch norm directly after conv/dwconv/dense (folded)."""
    return tuple(op.kind == "bn" and i > 0 and is_weighted(ops[i - 1].kind)
                 for i, op in enumerate(ops))


def cost_of(arch: Union[Arch, str], n_classes: int) -> Cost:
    """Parameters, MACs, flash and peak activation memory of ``arch``.

    Parameters
    ----------
    arch : Arch or str
        An architecture or its text.
    n_classes : int
        Outputs of the classifier head (>= 2).

    Returns
    -------
    Cost
        Totals and per-op rows (see the module docstring for the rules).

    Raises
    ------
    ArchError
        For a bad architecture text.
    InputError
        For a bad number of classes.
    """
    arch = _as_arch(arch)
    ops = expand(arch, n_classes)
    flags = folded_flags(ops)
    lives = live_ranges(ops, arch.input.shape)
    rows = (input_cost(arch),) + tuple(op_cost(op, i, f, lives)
                                       for i, (op, f) in enumerate(zip(ops, flags)))
    exportable = all(f for op, f in zip(ops, flags) if op.kind == "bn")
    # first of equal maxima; int8 counts the kernels' scratch, float32 the tensors only
    peak_row = max(rows, key=lambda r: r.live_elements + r.scratch_bytes)
    peak = max(r.live_elements for r in rows)
    return Cost(str(arch), n_classes, rows,
                params=sum(r.params for r in rows), state=sum(r.state for r in rows),
                macs=sum(r.macs for r in rows), flash_bytes=sum(r.flash_bytes for r in rows),
                peak_elements=peak,
                peak_int8_bytes=peak_row.live_elements + peak_row.scratch_bytes,
                peak_float32_bytes=4 * peak, peak_op=peak_row.name, exportable=exportable)

