"""Reading a search-space file: TOML, tables, keys and the check of every value.

The format is described in :mod:`search.space`; errors (:class:`SpaceError`)
name the file, the key, its value and the rule.
"""

from __future__ import annotations

import tomllib
from importlib import resources
from pathlib import Path
from typing import Any, Union

from tinyconv.arch import MAX_SIDE, MAX_WIDTH, MODES, ArchError, InputSpec, parse_input

from search.budget import budget_from_table
from search.recipes import RECIPE_KEYS, read_training
from search.space_blocks import KNOWN as BLOCK_KEYS
from search.space_blocks import read_blocks
from search.space_types import (CONV_KINDS, HEAD_KINDS, MAX_STAGES, POOL_KINDS, SHAREABLE,
                                Space, SpaceError, StageChoices)

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
