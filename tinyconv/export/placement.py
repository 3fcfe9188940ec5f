"""Where each activation tensor sits in the generated C's one static buffer.

The steps of an int8 network (the input quantisation, then each layer of
:class:`~tinyconv.quant.quantize.QuantizedNetwork`) each write one tensor; a
tensor lives from its step to the last step that reads it (every step reads
the tensor of the step before; a residual addition also its block's input).
The buffer's size is the largest, over steps, of the tensors alive together
plus the step's scratch: the cost model's int8 peak
(:mod:`tinyconv.liveness`). This plan reaches that bound:

* outside blocks, each tensor sits flush with one end of the buffer, the
  ends alternating: a step reads at one end and writes at the other (the
  input step writes at offset 0);
* a block's input stays where it is, flush with one end, until its addition;
  the block's own steps alternate between the ends of the rest of the buffer,
  starting at the end that brings the block's last output next to the block's
  input, so that the addition writes flush with the buffer's other end and
  the alternation goes on after the block;
* a step's scratch (the fast convolution's patch buffer) takes the free run
  between the tensors alive at that step, whose length is the buffer size
  less their sum, so at least the scratch; it starts on a word boundary when
  the run has room for that.

Since at every step the alive tensors are packed against the ends, the one
free run is exactly what the size leaves, and nothing alive overlaps:
:func:`overlaps` checks a plan, and the tests check it again independently.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import prod

from tinyconv.cost import scratch_bytes
from tinyconv.quant.quantize import QuantizedNetwork


@dataclass(frozen=True)
class Placed:
    """One tensor of the plan: written by step ``producer`` (-1: the input step),
    read last by step ``last_read``, at ``[offset, offset + size)``."""

    name: str
    producer: int
    last_read: int
    offset: int
    size: int


@dataclass(frozen=True)
class StepPlace:
    """Offsets of one layer's call: what it reads, what it writes, its scratch."""

    src: int
    skip: int | None
    dst: int
    scratch: int
    scratch_bytes: int


@dataclass(frozen=True)
class BufferPlan:
    """The buffer size, every tensor's place, and each layer's offsets.

    ``tensors[0]`` is the input step's tensor; ``tensors[j + 1]`` is written by
    layer ``j``.
    """

    size: int
    tensors: tuple[Placed, ...]
    steps: tuple[StepPlace, ...]


def plan_buffer(qnet: QuantizedNetwork, style: str = "fast") -> BufferPlan:
    """Plan the offsets of every tensor and scratch of ``qnet``'s C.

    Parameters
    ----------
    qnet : QuantizedNetwork
    style : {"fast", "plain"}
        Only the fast kernels use scratch (the convolution's int16 patches).

    Returns
    -------
    BufferPlan
        With ``size`` the largest sum of alive tensors and scratch of any step
        (equal to :attr:`tinyconv.cost.Cost.peak_int8_bytes` in the fast style).
    """
    layers = qnet.layers
    n = len(layers)
    sizes = [prod(qnet.input_shape)] + [prod(layer.op.out_shape) for layer in layers]
    scratch = [scratch_bytes(layer.op) if style == "fast" else 0 for layer in layers]
    # tensor t = j + 1 is written by layer j; tensor 0 by the input step
    reads = [(j,) if layers[j].skip is None else (j, layers[j].skip + 1) for j in range(n)]
    last = list(range(-1, n))
    for j, ins in enumerate(reads):
        for t in ins:
            last[t] = max(last[t], j)

    def alive(step: int) -> list[int]:
        return [t for t in range(n + 1) if t - 1 <= step <= last[t]]

    size = max([sizes[0]] + [sum(sizes[t] for t in alive(j)) + scratch[j] for j in range(n)])
    # the addition that closes the block whose first layer is j (its input: tensor j)
    opens = {layer.skip + 1: a for a, layer in enumerate(layers) if layer.skip is not None}
    low_end = [True] + [False] * n  # whether each tensor sits at its region's low end
    offset = [0] * (n + 1)
    region = (0, size)  # outside blocks, the whole buffer
    for j in range(n):
        t = j + 1
        if layers[j].skip is not None:
            # the addition: flush with the buffer's end away from the block's input
            low_end[t] = not low_end[layers[j].skip + 1]
            region = (0, size)
        elif j in opens:
            # a block's first layer: its input (tensor j) stays flush with its end and
            # the block's layers alternate over the rest, the last one next to it
            held_low = low_end[j]
            region = (offset[j] + sizes[j], size) if held_low else (0, offset[j])
            inner = opens[j] - j
            low_end[t] = held_low if inner % 2 == 1 else not held_low
        else:
            low_end[t] = not low_end[t - 1]
        offset[t] = region[0] if low_end[t] else region[1] - sizes[t]
    steps = []
    for j in range(n):
        spans = sorted((offset[t], offset[t] + sizes[t]) for t in alive(j))
        steps.append(StepPlace(src=offset[j], skip=None if layers[j].skip is None
                               else offset[layers[j].skip + 1], dst=offset[j + 1],
                               scratch=_free_run(spans, size, scratch[j]),
                               scratch_bytes=scratch[j]))
    names = ["input"] + [layer.op.name for layer in layers]
    tensors = tuple(Placed(names[t], t - 1, last[t], offset[t], sizes[t]) for t in range(n + 1))
    return BufferPlan(size, tensors, tuple(steps))


def _free_run(spans: list[tuple[int, int]], size: int, need: int) -> int:
    """Start of the first free run of ``need`` bytes between sorted ``spans`` in ``size``,
    on a word boundary where the run leaves room for it (the fast convolution then
    loads its patches two words at a time)."""
    at = 0
    for lo, hi in spans + [(size, size)]:
        if lo - at >= need:
            word = (at + 3) // 4 * 4
            return word if lo - word >= need else at
        at = max(at, hi)
    raise ValueError(f"no free run of {need} bytes in a buffer of {size} holding {spans}")


def overlaps(plan: BufferPlan) -> list[str]:
    """Every pair of things alive at one step that share a byte (empty for a sound plan).

    The things of step ``j``: the tensors alive during it and its scratch; the
    input step holds its own tensor alone. Each is also checked to lie inside
    the buffer.
    """
    problems = []
    for j, place in enumerate(plan.steps):
        things = [(t.name, t.offset, t.size) for t in plan.tensors
                  if t.producer <= j <= t.last_read]
        if place.scratch_bytes:
            things.append((f"scratch of step {j}", place.scratch, place.scratch_bytes))
        for name, lo, n in things:
            if lo < 0 or lo + n > plan.size:
                problems.append(f"step {j}: {name} at [{lo}, {lo + n}) is outside the "
                                f"buffer of {plan.size} bytes")
        for a in range(len(things)):
            for b in range(a + 1, len(things)):
                (na, la, sa), (nb, lb, sb) = things[a], things[b]
                if la < lb + sb and lb < la + sa:
                    problems.append(f"step {j}: {na} [{la}, {la + sa}) overlaps {nb} "
                                    f"[{lb}, {lb + sb})")
    return problems
