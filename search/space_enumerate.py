"""Enumerating a search space: every unique candidate, in the documented order
(:mod:`search.space`)."""

from __future__ import annotations

import itertools

from tinyconv.arch import (Arch, ArchError, BatchNorm, Conv, Dense, Depthwise, Dropout,
                           GlobalPool, Pool, expand)

from search.space_blocks import block_layers
from search.space_sample import subsample
from search.space_types import Space, SpaceError

def _stage_layers(f: int, k: int, conv: str, pool: str, pool_window: int, bn: bool,
                  blocks: tuple[int, str, int] = (0, "", 0)) -> list:
    stride = 2 if pool == "stride" else 1
    norm = [BatchNorm()] if bn else []
    if conv == "standard":
        layers = [Conv(f, k, stride)] + norm
    else:
        layers = [Depthwise(k, stride)] + norm + [Conv(f, 1)] + norm
    count, kind, expansion = blocks
    for _ in range(count):
        layers += block_layers(f, k, kind, expansion, bn)
    if pool in ("max", "avg"):
        layers.append(Pool(pool, pool_window))
    return layers


def _stage_options(space: Space, count: int):
    """Each item: a tuple of (filters, kernel, conv, pool) per stage."""
    shared_lists = [getattr(space.stages[0], n + "s") for n in space.shared] if count else []
    plans = space.widths if (space.widths and count) else (None,)
    for shared, plan in itertools.product(itertools.product(*shared_lists), plans):
        fixed = dict(zip(space.shared, shared))
        per_stage = []
        for i, st in enumerate(space.stages[:count]):
            per_stage.append(list(itertools.product(
                (plan[i],) if plan else st.filters,
                [fixed["kernel"]] if "kernel" in fixed else st.kernels,
                [fixed["conv"]] if "conv" in fixed else st.convs,
                [fixed["pool"]] if "pool" in fixed else st.pools)))
        for combo in itertools.product(*per_stage):
            if space.widening and any(a[0] > b[0] for a, b in zip(combo, combo[1:])):
                continue
            yield combo


def enumerate_space(space: Space, max_candidates: int | None = None,
                    seed: int = 0) -> list[Arch]:
    """The unique candidates of ``space``, in the documented order.

    Parameters
    ----------
    space : Space
    max_candidates : int, optional
        When there are more, a seeded random subsample of this many (see
        :func:`subsample`).
    seed : int

    Returns
    -------
    list of Arch
        Each valid for its input; no two with the same text.

    Raises
    ------
    SpaceError
        When no combination fits its input (the message shows the first error).
    """
    seen: set[str] = set()
    out: list[Arch] = []
    first_error: ArchError | None = None
    stage_cache: dict = {}

    def stage(opts: tuple, bn: bool, blocks: tuple = (0, "", 0)) -> tuple[tuple, str]:
        """Layers and text of one stage (cached: the same stage recurs a lot)."""
        key = (opts, bn, blocks)
        if key not in stage_cache:
            layers = tuple(_stage_layers(*opts, space.pool_window, bn, blocks))
            stage_cache[key] = layers, "-".join(map(str, layers))
        return stage_cache[key]

    tails = {}
    for gap, hidden, bn, drop in itertools.product((False, True), space.hidden,
                                                   space.batch_norm, space.dropout):
        layers = ([GlobalPool()] if gap else []) + ([Dense(hidden)] if hidden else []) \
            + ([BatchNorm()] if hidden and bn else []) + ([Dropout(drop)] if drop else [])
        tails[gap, hidden, bn, drop] = tuple(layers), "-".join(map(str, layers))

    for spec in space.inputs:
        spec_text = str(spec)
        for count in space.counts:
            for combo in _stage_options(space, count):
                plain = tuple(layer for opts in combo for layer in stage(opts, False)[0])
                try:  # shapes depend on neither batch norm nor blocks: check the plain body once
                    ops = expand(Arch(spec, plain), 2)
                    shape = next(op.in_shape for op in ops if op.kind in ("flatten", "dense"))
                except ArchError as exc:
                    first_error = first_error or exc
                    continue
                spatial = count > 0 and len(shape) == 3 and shape[:2] != (1, 1)
                for plan in space.blocks.plans(count):
                    bodies = {bn: [stage(opts, bn, blocks) for opts, blocks in zip(combo, plan)]
                              for bn in space.batch_norm}
                    for head, hidden, bn, drop in itertools.product(
                            space.heads, space.hidden, space.batch_norm, space.dropout):
                        tail, tail_text = tails[head == "gap" and spatial, hidden, bn, drop]
                        parts = [t for _, t in bodies[bn]] + ([tail_text] if tail_text else [])
                        # the same text as str(Arch(...)), built from cached pieces
                        text = spec_text + ("/" + "-".join(parts) if parts else "")
                        if text not in seen:
                            seen.add(text)
                            out.append(Arch(spec, tuple(layer for lay, _ in bodies[bn]
                                                        for layer in lay) + tail))
    if not out:
        raise SpaceError(f"{space.source}: no combination of the space fits its input; the "
                         f"first problem: {first_error}; use larger inputs or fewer stages")
    if max_candidates is not None and len(out) > max_candidates:
        out = subsample(out, max_candidates, seed)
    return out
