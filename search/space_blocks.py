"""The ``[blocks]`` table of a search-space file: residual blocks inside the stages.

Every key is optional and a list of choices::

    [blocks]
    count = [0, 1]                  # residual blocks after each stage's convolution,
                                    # before its pooling; one list, or a list per
                                    # stage: [[0], [0, 1, 2]] ([0]: none)
    kind = ["bottleneck", "pair"]   # bottleneck | pair (["bottleneck"])
    expansion = [2, 4]              # how much a bottleneck widens (integers 1..16, [4])

For a stage of ``f`` filters and kernel ``k``, in the architecture text form:

* ``bottleneck`` (the inverted bottleneck): ``[c{e f}k1-dw{k}-c{f}k1]``, a 1x1
  convolution widening ``e`` times, a depthwise one, a 1x1 narrowing back;
* ``pair`` (the plain residual block): ``[c{f}k{k}-c{f}k{k}]``;
* with batch norm, ``bn`` follows every convolution inside the blocks too.

The kind and the expansion are chosen once per candidate (for all its
blocks); the count stage by stage. A candidate with no block has no kind or
expansion, so those choices do not multiply it.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

from tinyconv.arch import BatchNorm, Block, Conv, Depthwise

BLOCK_KINDS = ("bottleneck", "pair")
MAX_BLOCKS = 8
MAX_EXPANSION = 16
KNOWN = ("count", "kind", "expansion")


@dataclass(frozen=True)
class BlockChoices:
    """The ``[blocks]`` choices: ``counts[i]`` for stage ``i + 1``."""

    counts: tuple[tuple[int, ...], ...] = ((0,),)
    kinds: tuple[str, ...] = ("bottleneck",)
    expansions: tuple[int, ...] = (4,)

    def plans(self, n_stages: int):
        """Each item: per stage of ``n_stages``, ``(count, kind, expansion)``."""
        per_stage = [self.counts[min(i, len(self.counts) - 1)] for i in range(n_stages)]
        for counts in itertools.product(*per_stage):
            if not any(counts):
                yield tuple((0, "", 0) for _ in counts)
                continue
            for kind, e in itertools.product(self.kinds, self.expansions):
                if kind == "pair" and e != self.expansions[0]:
                    continue  # the expansion does not change a pair: once is enough
                yield tuple((c, kind, e if kind == "bottleneck" else 0) for c in counts)

    def multiplicity(self, n_stages: int) -> int:
        """How many plans :meth:`plans` yields for ``n_stages`` stages."""
        return sum(1 for _ in self.plans(n_stages))


def read_blocks(reader, table: dict, n_stages: int) -> BlockChoices:
    """The checked choices of a ``[blocks]`` table (``reader``: the space's checker)."""
    counts = reader.per_stage(table.get("count", [0]), "blocks.count", n_stages,
                              lambda c: isinstance(c, int) and not isinstance(c, bool)
                              and 0 <= c <= MAX_BLOCKS,
                              f"a number of blocks 0..{MAX_BLOCKS}")
    kinds = reader.choices(table.get("kind", ["bottleneck"]), "blocks.kind",
                           lambda k: k in BLOCK_KINDS, f"one of {', '.join(BLOCK_KINDS)}")
    expansions = reader.choices(table.get("expansion", [4]), "blocks.expansion",
                                lambda e: isinstance(e, int) and not isinstance(e, bool)
                                and 1 <= e <= MAX_EXPANSION,
                                f"an integer 1..{MAX_EXPANSION}")
    return BlockChoices(counts, kinds, expansions)


def block_layers(f: int, k: int, kind: str, expansion: int, bn: bool) -> list[Block]:
    """One residual block of ``kind`` keeping ``f`` channels, kernel ``k``."""
    norm = [BatchNorm()] if bn else []
    if kind == "bottleneck":
        inner = [Conv(expansion * f, 1)] + norm + [Depthwise(k)] + norm + [Conv(f, 1)] + norm
    else:
        inner = [Conv(f, k)] + norm + [Conv(f, k)] + norm
    return [Block(tuple(inner))]
