"""The parsed form of a search-space file: :class:`Space`, its stages and its error."""

from __future__ import annotations

from dataclasses import dataclass, field

from tinyconv.arch import InputSpec
from tinyconv.errors import InputError

from search.budget import Budget
from search.recipes import TrainingChoices
from search.space_blocks import BlockChoices

CONV_KINDS = ("standard", "depthwise")
POOL_KINDS = ("max", "avg", "none", "stride")
HEAD_KINDS = ("gap", "flatten")
SHAREABLE = ("kernel", "conv", "pool")
MAX_STAGES = 8


class SpaceError(InputError):
    """A search-space file that cannot be used; the message names key, value and rule."""


@dataclass(frozen=True)
class StageChoices:
    """The choices of one stage (1-based ``index``)."""

    index: int
    filters: tuple[int, ...]
    kernels: tuple[int, ...]
    convs: tuple[str, ...]
    pools: tuple[str, ...]


@dataclass(frozen=True)
class Space:
    """A parsed search-space file.

    ``stages[i]`` holds the choices of stage ``i + 1``; there are
    ``max(counts)`` of them. ``widths``, when not empty, replaces the
    per-stage filter choices by whole plans (``stages[i].filters`` then lists
    the plans' values for stage ``i + 1``). ``text`` is the file's text (kept
    for the run record) and ``source`` where it came from. ``training`` holds
    the ``[training]`` table's recipe choices (:mod:`search.recipes`).
    """

    inputs: tuple[InputSpec, ...]
    counts: tuple[int, ...]
    stages: tuple[StageChoices, ...]
    pool_window: int = 2
    shared: tuple[str, ...] = SHAREABLE
    widening: bool = True
    heads: tuple[str, ...] = ("flatten",)
    hidden: tuple[int, ...] = (0,)
    batch_norm: tuple[bool, ...] = (False,)
    dropout: tuple[int, ...] = (0,)
    budget: Budget = field(default_factory=Budget)
    description: str = ""
    text: str = ""
    source: str = "<text>"
    widths: tuple[tuple[int, ...], ...] = ()
    training: TrainingChoices = field(default_factory=TrainingChoices)
    blocks: BlockChoices = field(default_factory=BlockChoices)

    def size_bound(self) -> int:
        """Combinations before removing duplicates and misfits (an upper bound)."""
        total = 0
        for count in self.counts:
            per = 1
            for name in self.shared:
                per *= len(getattr(self.stages[0], name + "s")) if count else 1
            per *= len(self.widths) if (self.widths and count) else 1
            for st in self.stages[:count]:
                per *= 1 if self.widths else len(st.filters)
                for name in SHAREABLE:
                    if name not in self.shared:
                        per *= len(getattr(st, name + "s"))
            total += per * self.blocks.multiplicity(count)
        return (total * len(self.inputs) * len(self.heads) * len(self.hidden)
                * len(self.batch_norm) * len(self.dropout))


# ---------------------------------------------------------------- reading
