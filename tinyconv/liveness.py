"""Which activation tensors are alive at each step: the live ranges behind peak memory.

A deployed network runs *steps*: the input quantisation, then every op that
writes a new buffer (:func:`tinyconv.cost_rules.writes_buffer`: its kind's
``OpRule.buffer``). Each step writes one tensor;
ReLU, batch norm, dropout and flatten work in place, so their output is the
tensor they read. A tensor lives from the step that writes it to the last
step that reads it (a residual block's input: until the addition that closes
the block); at each step the tensors alive are exactly those that must sit in
memory together, beside the step's kernel scratch. The cost model's peak is
the largest such sum (:mod:`tinyconv.cost`), and the C writer places every
tensor so that the ones alive together never overlap
(:mod:`tinyconv.export.placement`).
"""

from __future__ import annotations

from dataclasses import dataclass
from math import prod
from typing import Sequence

from tinyconv.cost_rules import writes_buffer
from tinyconv.ops import Op, sources



@dataclass(frozen=True)
class Tensor:
    """One activation buffer: written by step ``producer`` (an op index; -1 is the
    input step, or the tensor a walk starts from), last read by step ``last_read``."""

    name: str
    producer: int
    last_read: int
    elements: int


@dataclass(frozen=True)
class Lives:
    """The live ranges of a run of ops.

    Attributes
    ----------
    tensors : tuple of Tensor
        In the order written (the walk's first tensor first).
    owner : tuple of int
        Per op, the index into ``tensors`` of the tensor its output is (an
        in-place op's output is the tensor it read).
    reads : tuple of tuple of int
        Per op, the tensors it reads (empty for in-place ops, which allocate nothing).
    alive : tuple of tuple of int
        Per op that writes a buffer, the tensors alive during it (those it reads,
        the one it writes, and any other written before and read after); empty
        for in-place ops.
    first_alive : tuple of int
        The tensors alive at the walk's first tensor's step (the input step).
    """

    tensors: tuple[Tensor, ...]
    owner: tuple[int, ...]
    reads: tuple[tuple[int, ...], ...]
    alive: tuple[tuple[int, ...], ...]
    first_alive: tuple[int, ...]

    def elements(self, ids: Sequence[int]) -> int:
        """Elements of the tensors ``ids`` together."""
        return sum(self.tensors[t].elements for t in ids)


def live_ranges(ops: Sequence[Op], in_shape: tuple[int, ...], in_name: str = "input") -> Lives:
    """Walk ``ops`` (in execution order) from a tensor of ``in_shape`` written before them.

    Parameters
    ----------
    ops : sequence of Op
        All of ``expand()`` (with the input step as the first tensor), or the
        ops of one layer (the first tensor is then the layer's input, written
        by an earlier layer).
    in_shape : tuple of int
        Per-image shape of the first tensor.
    in_name : str
        Its name.

    Notes
    -----
    The walk's last tensor (the logits, or a layer's output) has no reader
    among ``ops``; it counts as alive at the step that writes it only.
    """
    tensors = [[in_name, -1, -1, prod(in_shape)]]
    owner: list[int] = []
    reads: list[tuple[int, ...]] = []
    for i, (op, src) in enumerate(zip(ops, sources(tuple(ops)))):
        ins = tuple(owner[j] if j >= 0 else 0 for j in src)
        if writes_buffer(op.kind):
            for t in ins:
                tensors[t][2] = max(tensors[t][2], i)
            tensors.append([op.name, i, i, prod(op.out_shape)])
            owner.append(len(tensors) - 1)
            reads.append(tuple(dict.fromkeys(ins)))
        else:
            owner.append(ins[0])
            reads.append(())
    done = tuple(Tensor(*t) for t in tensors)

    def at(step: int) -> tuple[int, ...]:
        return tuple(k for k, t in enumerate(done) if t.producer <= step <= t.last_read)

    alive = tuple(at(i) if writes_buffer(ops[i].kind) else () for i in range(len(ops)))
    return Lives(done, tuple(owner), tuple(reads), alive, at(-1))
