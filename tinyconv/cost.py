"""What a network costs: parameters, MACs, activation memory and int8 flash.

The one source of these numbers for the search's budgets, the report and the
C export. Everything is computed from :func:`tinyconv.arch.expand`, one row per
:class:`~tinyconv.arch.Op`, plus one row for the input quantisation.

Counting rules (the contract in DEVELOPERS.md, "Cost"):

* **parameters** (trained): conv ``k*k*c_in*f + f``; depthwise ``k*k*c + c``;
  dense ``n_in*n_out + n_out``; batch norm ``2c`` (gamma, beta). Batch norm's
  running mean and variance (``2c``) are **state**, counted apart.
* **MACs per image**: conv ``h_out*w_out*k*k*c_in*f``; depthwise
  ``h_out*w_out*k*k*c``; dense ``n_in*n_out``. Pooling, ReLU, batch norm (folded
  at deployment), dropout and flatten count 0: they multiply-accumulate nothing
  in the int8 kernels.
* **flash** (int8 deployment layout, byte for byte what ``export/`` writes):
  the input table of ``256*c`` int8; per conv/dwconv/dense one byte per weight
  plus 12 bytes per output channel (int32 bias, int32 multiplier, int32
  shift); a batch norm directly after conv/dwconv/dense is folded into it and
  costs nothing. A batch norm anywhere else has no int8 form: the exporter
  refuses it, and :attr:`Cost.exportable` is False (its flash counts 0).
* **peak activation memory**: tensors live from the step that writes them
  to the last step that reads them (:mod:`tinyconv.liveness`; the steps are
  the input quantisation and the ops that write a new buffer: conv, dwconv,
  maxpool, avgpool, gap, dense, add). At each step the tensors alive together
  are summed, plus in int8 the scratch its kernel needs (a convolution's two
  int16 patches, ``4 k k c_in`` bytes; see :func:`scratch_bytes`); the peak
  is the largest such sum. In a chain that is the step's input + output;
  inside a residual block the block's input is alive too, until the addition
  that closes the block reads it. ReLU, batch norm, dropout and flatten work
  in place and add nothing. The C places every tensor and scratch at an
  offset planned from these live ranges, in one buffer of exactly the int8
  peak (:mod:`tinyconv.export.placement`). int8 bytes = elements + scratch;
  float32 bytes = 4 x elements. The input quantisation reads the caller's raw
  pixels (a buffer outside the activation buffer, e.g. the camera's frame) and writes the
  int8 input, so it counts ``h*w*c``.

KB in this package means 1,024 bytes.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from math import prod
from typing import TYPE_CHECKING, Union

if TYPE_CHECKING:
    import pandas as pd


from tinyconv.arch import (Arch, BatchNorm, Conv, Dense, Depthwise, Op, check_classes, expand,
                           expand_head, expand_layer, parse, token_count)
from tinyconv.errors import InputError
from tinyconv.liveness import BUFFER_KINDS, Lives, live_ranges

__all__ = ["BUFFER_KINDS", "WEIGHT_KINDS", "OpCost", "Cost", "Totals", "cost_of", "totals_of",
           "scratch_bytes", "op_cost", "input_cost", "folded_flags", "training_memory",
           "TrainingMemory"]
#: op kinds with int8 weights in flash
WEIGHT_KINDS = frozenset({"conv", "dwconv", "dense"})
#: flash bytes per output channel of a weighted op: int32 bias, multiplier, shift
CHANNEL_BYTES = 12
#: rows of the input lookup table (one per raw 8-bit pixel value)
INPUT_TABLE_ROWS = 256
KB = 1024


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
class Cost:
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

    @property
    def flash_kb(self) -> float:
        return self.flash_bytes / KB

    @property
    def peak_kb(self) -> float:
        """int8 peak activation memory in KB (1,024 bytes)."""
        return self.peak_int8_bytes / KB

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


def _as_arch(arch: Union[Arch, str]) -> Arch:
    return parse(arch) if isinstance(arch, str) else arch


def scratch_bytes(op: Op) -> int:
    """Bytes of scratch the int8 kernel of ``op`` needs in the activation buffer.

    A convolution copies the receptive fields of two output pixels into an
    int16 buffer (``x - zp``, padding 0) before multiplying: ``4 k k c_in``
    bytes. The other kernels loop directly.
    """
    if op.kind == "conv":
        return 4 * op.kernel * op.kernel * op.in_shape[2]
    return 0


def _numbers(op: Op) -> tuple[int, int, int, int, int]:
    """(params, state, macs, out_elements, flash_bytes) of one op."""
    shape_in, shape_out = op.in_shape, op.out_shape
    n_in, n_out = prod(shape_in), prod(shape_out)
    kind = op.kind
    if kind == "conv":
        f = op.filters
        weights = op.kernel * op.kernel * shape_in[2] * f
        return (weights + f, 0, shape_out[0] * shape_out[1] * weights, n_out,
                weights + CHANNEL_BYTES * f)
    if kind == "dwconv":
        c = shape_in[2]
        weights = op.kernel * op.kernel * c
        return (weights + c, 0, shape_out[0] * shape_out[1] * weights, n_out,
                weights + CHANNEL_BYTES * c)
    if kind == "dense":
        weights = n_in * n_out
        return weights + n_out, 0, weights, n_out, weights + CHANNEL_BYTES * n_out
    if kind == "bn":
        c = shape_in[-1]
        return 2 * c, 2 * c, 0, n_out, 0
    return 0, 0, 0, n_out, 0


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
        live = prod(op.in_shape) + prod(op.out_shape) if op.kind in BUFFER_KINDS else 0
        names = ()
    return OpCost(index, op.name, op.kind, op.in_shape, op.out_shape, *_numbers(op),
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
    return tuple(op.kind == "bn" and i > 0 and ops[i - 1].kind in WEIGHT_KINDS
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


@dataclass(frozen=True)
class Totals:
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

    @property
    def flash_kb(self) -> float:
        return self.flash_bytes / KB

    @property
    def peak_kb(self) -> float:
        return self.peak_int8_bytes / KB


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
        p, _, m, _, f = _numbers(op)
        if op.kind in BUFFER_KINDS:
            peak = max(peak, lives.elements(lives.alive[i]) + scratch_bytes(op))
        params, macs, flash = params + p, macs + m, flash + f
    return params, macs, flash, peak


def _exportable(ops, after_weights: bool) -> bool:
    """Whether every batch norm of one layer's ops can be folded (directly after a
    weighted op; the layer's first op after the previous layer's weights)."""
    return all(i > 0 and ops[i - 1].kind in WEIGHT_KINDS if i else after_weights
               for i, op in enumerate(ops) if op.kind == "bn")


# ---------------------------------------------------------------- training memory

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
    """Per-image elements ``op`` keeps from forward for backward."""
    n_in, n_out = prod(op.in_shape), prod(op.out_shape)
    if op.kind in ("conv", "dwconv", "dense", "maxpool"):
        return n_in            # the input (max pooling: to find the winners)
    if op.kind in ("relu", "dropout"):
        return n_out           # the output (ReLU) or the mask (dropout)
    if op.kind == "bn":
        return n_in + 2 * op.in_shape[-1]   # normalised input, batch mean and 1/std
    return 0                   # avgpool, gap, flatten need only shapes


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
