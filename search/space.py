"""Search-space files: which networks to try, and the budgets they must fit.

A space file is TOML (read with the standard library's :mod:`tomllib`). Only
``[input]`` is required; every other table and key is optional, and every key
is a list of choices unless its comment says "one value". An example, whose
comments give the default of each optional key::

    format = 1                      # one value: the version of this format (1)
    description = "tiles, 8 marks"  # one value: free text ("")

    [input]
    sizes = [32, "32x24"]           # a side (square) or "HxW"
    modes = ["rgb", "gray"]         # rgb, gray, ycc, hsv, or stacked such as "rgb+hsv":
                                    # every size in every mode
    # specs = ["32x32rgb", "16x16gray"]  # instead of sizes and modes: just these

    [stages]
    count = [0, 1, 2]               # how many conv stages a candidate has ([0])
    filters = [[4, 8], [8, 16]]     # filter choices per stage (a list per stage),
                                    # or one list for every stage: [8, 16]
    # widths = [[4, 8], [16, 32]]   # instead of filters: whole plans; a candidate
                                    # with n stages uses a plan's first n widths
    kernel = [3]                    # odd sizes; one list, or a list per stage ([3])
    conv = ["standard", "depthwise"]  # standard | depthwise (["standard"])
    pool = ["max"]                  # max | avg | none | stride (["max"])
    pool_window = 2                   # one value: size and stride of the pooling (2)
    shared = ["kernel", "conv", "pool"]  # chosen once per candidate for all its
                                    # stages, not stage by stage (all three)
    widening = true                 # one value: filters never decrease from a
                                    # stage to the next (true)

    [head]
    kind = ["gap", "flatten"]       # gap | flatten (["flatten"])
    hidden = [0, 32]                # hidden dense widths; 0 = none ([0])

    [options]
    batch_norm = [false, true]      # true: bn after every conv and hidden dense ([false])
    dropout = [0, 20]               # percent, before the classifier; 0 = none ([0])

    [blocks]                        # residual blocks inside the stages (search/space_blocks.py)
    count = [0, 1]                  # blocks after each stage's convolution ([0])
    kind = ["bottleneck", "pair"]   # inverted bottleneck or plain pair (["bottleneck"])
    expansion = [2, 4]              # a bottleneck's widening ([4])

    [budget]                        # one value each; leave a key out for no limit
    max_params = 50000              # trained parameters
    max_macs = 1000000              # multiply-accumulates per image
    max_peak_kb = 32                # int8 peak activation memory (KB = 1,024 bytes)
    max_flash_kb = 256              # int8 deployment layout
    max_ms = 50                     # milliseconds per image on the [device] (model)

    [device]                        # the part the time is for (needed by max_ms)
    core = "cortex-m4"              # cortex-m3, cortex-m4, cortex-m7, cortex-m33
    clock_mhz = 80                  # default: the core's assumed clock

    [training]                      # recipes: see search/recipes.py (the run's setting)
    augment = ["none", "shift2+mirror"]  # augmentation texts (tinyconv/augment.py)
    copies = [1, 4]                 # copies of each image an epoch passes over
    lr = [0.003, 0.01]              # learning rates
    weight_decay = [0, 1e-4]        # decoupled weight decay
    schedule = ["constant"]         # constant | step | cosine

What a stage is, in the architecture text form (:mod:`tinyconv.arch`), for
``f`` filters and kernel ``k``:

* ``standard``: ``c{f}k{k}``; ``depthwise``: ``dw{k}-c{f}k1`` (depthwise then
  a 1x1 convolution);
* ``pool``: ``max`` appends ``p{pool_window}``, ``avg`` appends ``a{pool_window}``,
  ``none`` nothing, ``stride`` gives the stage's first convolution stride 2;
* with batch norm, ``bn`` follows every convolution (and the hidden dense layer);
* residual blocks (``[blocks]``, :mod:`search.space_blocks`) come after the
  stage's convolution, before its pooling.

The head: ``gap`` appends global average pooling (only when a stage exists and
the map is larger than 1x1: otherwise it is the same network as ``flatten``,
which is the implicit head); a hidden width ``n > 0`` appends ``d{n}``; dropout
``p > 0`` appends ``x{p}``. The final dense layer to the classes is implicit.
For example ``count = 2``, filters 8 then 16, depthwise, max pooling, gap,
hidden 32 and batch norm give ``dw3-bn-c8k1-bn-p2-dw3-bn-c16k1-bn-p2-gap-d32-bn``.

Enumeration (:func:`enumerate_space`) is deterministic: inputs (sizes, then
modes, in file order; or specs in order), stage count, the shared choices, the
width plans, the per-stage choices (stage 1 slowest), the block plans (counts
stage by stage, then kind and expansion), head kind, hidden width, batch
norm, dropout. A text seen before is dropped (equivalent candidates
appear once), and so are combinations that do not fit their input (e.g.
pooling a 2x2 map by 4). :func:`subsample` draws a seeded subset when there are
more candidates than wanted, and :func:`filter_budget` keeps those within a
:class:`Budget`, counting what each limit removed. A budget given on the
command line replaces the file's with :func:`dataclasses.replace`, e.g.
``replace(space.budget, max_macs=500_000)``.

Errors (:class:`SpaceError`, an ``InputError``) name the file, the key, its
value and the rule; unknown keys are refused with the list of known ones.
"""

from __future__ import annotations

import itertools
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Sequence, Union

import numpy as np

from tinyconv.arch import (MAX_SIDE, MAX_WIDTH, MODES, Arch, ArchError, BatchNorm, Conv,
                           Dense, Depthwise, Dropout, GlobalPool, InputSpec, Pool, expand,
                           parse_input)
from tinyconv.errors import InputError

from search.budget import Budget, Filtered, budget_from_table, filter_budget  # noqa: F401  (re-exported)
from search.recipes import RECIPE_KEYS, TrainingChoices, read_training
from search.space_blocks import KNOWN as BLOCK_KEYS
from search.space_blocks import BlockChoices, block_layers, read_blocks

__all__ = ["SpaceError", "Space", "StageChoices", "Budget", "Filtered", "load_space",
           "space_from_text",
           "builtin_space_text", "enumerate_space", "subsample", "filter_budget"]

CONV_KINDS = ("standard", "depthwise")
POOL_KINDS = ("max", "avg", "none", "stride")
HEAD_KINDS = ("gap", "flatten")
SHAREABLE = ("kernel", "conv", "pool")
MAX_STAGES = 8

_KNOWN = {
    "": ("format", "description", "input", "stages", "head", "options", "budget", "device",
         "training", "blocks"),
    "input": ("sizes", "modes", "specs"),
    "stages": ("count", "filters", "widths", "kernel", "conv", "pool", "pool_window",
               "shared", "widening"),
    "head": ("kind", "hidden"),
    "options": ("batch_norm", "dropout"),
    "budget": ("max_params", "max_macs", "max_peak_kb", "max_flash_kb", "max_ms"),
    "device": ("core", "clock_mhz"),
    "training": RECIPE_KEYS,
    "blocks": BLOCK_KEYS,
}


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


class _Reader:
    """Checks values of one file, naming it, the key, the value and the rule."""

    def __init__(self, source: str):
        self.source = source

    def fail(self, key: str, value: Any, rule: str) -> SpaceError:
        return SpaceError(f"{self.source}: {key} = {value!r}: {rule}")

    def table(self, data: dict, name: str) -> dict:
        value = data.get(name, {}) if name else data
        if not isinstance(value, dict):
            raise self.fail(name, value, f"must be a table [{name}]")
        unknown = [k for k in value if k not in _KNOWN[name]]
        if unknown:
            where = f"[{name}]" if name else "the top level"
            raise SpaceError(f"{self.source}: unknown key {(name + '.' if name else '')}"
                             f"{unknown[0]}; known keys in {where}: "
                             f"{', '.join(_KNOWN[name])}")
        return value

    def choices(self, value: Any, key: str, check, what: str, unique: bool = True) -> tuple:
        """A non-empty list (without repeats if ``unique``) whose items pass ``check``."""
        if not isinstance(value, list) or not value:
            raise self.fail(key, value, f"must be a non-empty list, each item {what} "
                                        "(write [x] for a single choice)")
        for item in value:
            if not check(item):
                raise self.fail(key, value, f"{item!r} is not {what}")
        if unique and len(set(map(repr, value))) != len(value):
            raise self.fail(key, value, "lists a choice twice; give each once")
        return tuple(value)

    def per_stage(self, value: Any, key: str, n_stages: int, check, what: str
                  ) -> tuple[tuple, ...]:
        """One list for every stage, or a list per stage (at least ``n_stages``)."""
        if isinstance(value, list) and value and all(isinstance(v, list) for v in value):
            if len(value) != n_stages:
                raise self.fail(key, value, f"gives choices for {len(value)} stages but "
                                            f"stages.count goes up to {n_stages}; give one "
                                            "list per stage, or one list for all stages")
            return tuple(self.choices(v, f"{key}[{i}]", check, what)
                         for i, v in enumerate(value))
        return (self.choices(value, key, check, what),) * max(n_stages, 1)


def _is_int(x: Any, lo: int, hi: int) -> bool:
    return isinstance(x, int) and not isinstance(x, bool) and lo <= x <= hi


def _input_spec(item: Any, mode: str) -> InputSpec | None:
    if _is_int(item, 1, MAX_SIDE):
        return InputSpec(item, item, mode)
    if isinstance(item, str):
        h, x, w = item.partition("x")
        if x and h.isdigit() and w.isdigit() and h.isascii() and w.isascii():
            if 1 <= int(h) <= MAX_SIDE and 1 <= int(w) <= MAX_SIDE:
                return InputSpec(int(h), int(w), mode)
    return None


def _parsed_spec(item: Any) -> InputSpec | None:
    if not isinstance(item, str):
        return None
    try:
        return parse_input(item)
    except ArchError:
        return None


def load_space(spec: Union[str, Path]) -> Space:
    """Read a search-space file, its text, or a space shipped with the package.

    Parameters
    ----------
    spec : str or Path
        A :class:`~pathlib.Path`; or a str that is TOML text (it contains a
        newline or ``=``), ``builtin:NAME`` (a file in ``tinyconv/spaces``,
        e.g. ``builtin:demo``), or a path.

    Raises
    ------
    SpaceError
        Naming the file, the key, the bad value and the rule.
    BudgetError
        For an unusable budget value.
    FileNotFoundError
        When the path does not exist.
    """
    if isinstance(spec, Path):
        source, text = str(spec), spec.read_text(encoding="utf-8")
    elif not isinstance(spec, str):
        raise TypeError(f"space must be a path or a str, got {type(spec).__name__}")
    elif spec.startswith("builtin:"):
        source, text = spec, builtin_space_text(spec[len("builtin:"):])
    elif "\n" in spec or "=" in spec:
        source, text = "<text>", spec
    else:
        source, text = spec, Path(spec).read_text(encoding="utf-8")
    return space_from_text(text, source)


def space_from_text(text: str, source: str) -> Space:
    """A space from its TOML ``text``; ``source`` names it in messages and the record.

    Raises
    ------
    SpaceError
        As :func:`load_space`.
    """
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpaceError(f"{source}: not valid TOML: {exc}; see the space format in "
                         "search/space.py") from None
    return _space_from_data(data, text, source)


def builtin_space_text(name: str) -> str:
    """The text of ``tinyconv/spaces/{name}.toml``."""
    folder = resources.files("tinyconv") / "spaces"
    names = sorted(p.name[:-5] for p in folder.iterdir() if p.name.endswith(".toml"))
    if name not in names:
        raise SpaceError(f"builtin:{name}: no such space shipped; known: "
                         f"{', '.join('builtin:' + n for n in names)}")
    return (folder / f"{name}.toml").read_text(encoding="utf-8")


def _space_from_data(data: dict, text: str, source: str) -> Space:
    r = _Reader(source)
    top = r.table(data, "")
    fmt = top.get("format", 1)
    if fmt != 1 or isinstance(fmt, bool):
        raise r.fail("format", fmt, "this version of tinyconv reads format 1 only")
    description = top.get("description", "")
    if not isinstance(description, str):
        raise r.fail("description", description, "must be a string")

    inp = r.table(data, "input")
    if "specs" in inp:
        if "sizes" in inp or "modes" in inp:
            raise SpaceError(f"{source}: [input] gives specs and also sizes/modes; give "
                             "either specs = [\"32x32rgb\", ...] or sizes and modes")
        inputs = r.choices(inp["specs"], "input.specs", _parsed_spec,
                           "an input spec such as \"32x32rgb\" (modes: "
                           f"{', '.join(MODES)})")
        inputs = tuple(_parsed_spec(x) for x in inputs)
    else:
        for key in ("sizes", "modes"):
            if key not in inp:
                raise SpaceError(f"{source}: missing key input.{key}; e.g. sizes = [32], "
                                 "modes = [\"rgb\"] (or specs = [\"32x32rgb\"])")
        modes = r.choices(inp["modes"], "input.modes",
                          lambda m: isinstance(m, str) and _parsed_spec(f"1x1{m}") is not None,
                          f"a colour mode ({', '.join(MODES)}) or several joined by '+', "
                          "e.g. \"rgb+hsv\"")
        sizes = r.choices(inp["sizes"], "input.sizes", lambda s: _input_spec(s, "rgb"),
                          f"a side from 1 to {MAX_SIDE} or a string \"HxW\"")
        inputs = tuple(_input_spec(s, m) for s in sizes for m in modes)

    st = r.table(data, "stages")
    counts = r.choices(st.get("count", [0]), "stages.count",
                       lambda c: _is_int(c, 0, MAX_STAGES), f"an integer 0..{MAX_STAGES}")
    n = max(counts)
    if n and ("filters" in st) == ("widths" in st):
        raise SpaceError(f"{source}: stages.count goes up to {n}, so give exactly one of "
                         "stages.filters (choices per stage, e.g. filters = [8, 16]) or "
                         "stages.widths (whole plans, e.g. widths = [[8, 16], [16, 32]])")
    is_width = lambda f: _is_int(f, 1, MAX_WIDTH)  # noqa: E731
    widths: tuple[tuple[int, ...], ...] = ()
    if "widths" in st:
        plans = st["widths"]
        if not (isinstance(plans, list) and plans and all(isinstance(p, list) for p in plans)):
            raise r.fail("stages.widths", plans, "must be a list of plans, each a list of "
                         "filters per stage, e.g. [[8, 16], [16, 32]]")
        widths = tuple(r.choices(p, f"stages.widths[{i}]", is_width,
                                 f"an integer 1..{MAX_WIDTH}", unique=False)
                       for i, p in enumerate(plans))
        for i, plan in enumerate(widths):
            if len(plan) < n:
                raise r.fail(f"stages.widths[{i}]", list(plan), f"has {len(plan)} stages "
                             f"but stages.count goes up to {n}; give {n} widths")
        if len(set(widths)) != len(widths):
            raise r.fail("stages.widths", plans, "lists a plan twice; give each once")
        filters = tuple(tuple(dict.fromkeys(p[i] for p in widths)) for i in range(n)) \
            or ((8,),)
    else:
        filters = r.per_stage(st.get("filters", [8]), "stages.filters", n, is_width,
                              f"an integer 1..{MAX_WIDTH}")
    kernels = r.per_stage(st.get("kernel", [3]), "stages.kernel", n,
                          lambda k: _is_int(k, 1, 31) and k % 2 == 1,
                          "an odd kernel size 1..31 (same padding needs an odd kernel)")
    convs = r.per_stage(st.get("conv", ["standard"]), "stages.conv", n,
                        lambda c: c in CONV_KINDS, f"one of {', '.join(CONV_KINDS)}")
    pools = r.per_stage(st.get("pool", ["max"]), "stages.pool", n,
                        lambda p: p in POOL_KINDS, f"one of {', '.join(POOL_KINDS)}")
    pool_window = st.get("pool_window", 2)
    if not _is_int(pool_window, 2, MAX_SIDE):
        raise r.fail("stages.pool_window", pool_window, f"must be one integer 2..{MAX_SIDE}")
    shared: tuple[str, ...] = ()
    if st.get("shared", SHAREABLE) != []:  # [] (nothing shared) is allowed here
        shared = r.choices(st.get("shared", list(SHAREABLE)), "stages.shared",
                           lambda s: s in SHAREABLE, f"one of {', '.join(SHAREABLE)}")
    for name, lists in (("kernel", kernels), ("conv", convs), ("pool", pools)):
        if name in shared and len(set(lists)) > 1:
            raise r.fail(f"stages.{name}", st[name], "is given per stage, so it cannot be "
                         f"in stages.shared; take {name!r} out of shared or give one list")
    widening = st.get("widening", True)
    if not isinstance(widening, bool):
        raise r.fail("stages.widening", widening, "must be true or false")
    stages = tuple(StageChoices(i + 1, filters[i], kernels[i], convs[i], pools[i])
                   for i in range(n))

    head = r.table(data, "head")
    heads = r.choices(head.get("kind", ["flatten"]), "head.kind",
                      lambda h: h in HEAD_KINDS, f"one of {', '.join(HEAD_KINDS)}")
    hidden = r.choices(head.get("hidden", [0]), "head.hidden",
                       lambda u: _is_int(u, 0, MAX_WIDTH),
                       f"a width 0..{MAX_WIDTH} (0 for no hidden layer)")
    opts = r.table(data, "options")
    batch_norm = r.choices(opts.get("batch_norm", [False]), "options.batch_norm",
                           lambda b: isinstance(b, bool), "true or false")
    dropout = r.choices(opts.get("dropout", [0]), "options.dropout",
                        lambda p: _is_int(p, 0, 99), "a percent 0..99 (0 for none)")
    budget = budget_from_table(r.table(data, "budget"), source, r.table(data, "device"))
    blocks = read_blocks(r, r.table(data, "blocks"), n)
    training = read_training(r.table(data, "training"), r)
    oblong = [str(spec) for spec in inputs if spec.h != spec.w]
    turning = [a for a in training.augment if "turn" in a.split("+")]
    if oblong and turning:
        raise r.fail("training.augment", list(training.augment),
                     f"{turning[0]!r} turns images by quarter turns, which needs square "
                     f"inputs, but the space has {oblong[0]}; take turn out or give square "
                     "inputs only")
    return Space(inputs, counts, stages, pool_window, tuple(shared), widening, heads, hidden,
                 batch_norm, dropout, budget, description, text, source, widths, training,
                 blocks)


# ---------------------------------------------------------------- enumerating


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


def subsample(candidates: Sequence[Arch], k: int, seed: int | np.random.Generator = 0
              ) -> list[Arch]:
    """``k`` of ``candidates`` drawn at random without repeats, in their original order.

    Parameters
    ----------
    candidates : sequence of Arch
    k : int
        How many to keep (>= 1); all are kept when there are no more than ``k``.
    seed : int or numpy.random.Generator
    """
    if isinstance(k, bool) or not isinstance(k, int) or k < 1:
        raise InputError(f"max candidates must be a positive integer, got {k!r}")
    if len(candidates) <= k:
        return list(candidates)
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    keep = np.sort(rng.choice(len(candidates), size=k, replace=False))
    return [candidates[i] for i in keep]
