"""Tests of search-space files: reading, enumerating, budget filtering, subsampling.

Outside sources: the standard library's :mod:`tomllib` reads every file; the
budget checks are compared with :func:`tinyconv.cost.cost_of` computed
independently per candidate, and the counts of the small spaces are worked
out by hand in each test.
"""

from __future__ import annotations

import dataclasses
import tomllib
from pathlib import Path

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from search.space import (Budget, SpaceError, builtin_space_text, enumerate_space,
                          filter_budget, load_space, subsample)
from tinyconv.arch import parse
from tinyconv.cost import cost_of
from tinyconv.errors import BudgetError, InputError

SMALL = """
[input]
sizes = [8]
modes = ["gray"]
[stages]
count = [0, 1]
filters = [4, 8]
conv = ["standard", "depthwise"]
[head]
kind = ["gap", "flatten"]
"""


def texts(space_text: str) -> list[str]:
    return [str(a) for a in enumerate_space(load_space(space_text))]


# ---------------------------------------------------------------- enumeration


def test_small_space_enumerates_in_the_documented_order():
    """A hand-enumerated space: order, deduplication of the stage-less heads."""
    assert texts(SMALL) == [
        "8x8gray",                         # no stage: gap and flatten are the same network
        "8x8gray/c4k3-p2-gap", "8x8gray/c4k3-p2",
        "8x8gray/c8k3-p2-gap", "8x8gray/c8k3-p2",
        "8x8gray/dw3-c4k1-p2-gap", "8x8gray/dw3-c4k1-p2",
        "8x8gray/dw3-c8k1-p2-gap", "8x8gray/dw3-c8k1-p2",
    ]


def test_stage_building_blocks():
    """stride pooling, average pooling, batch norm, hidden dense and dropout tokens."""
    got = texts("""
[input]
specs = ["16x16rgb"]
[stages]
count = [1]
filters = [6]
conv = ["standard", "depthwise"]
pool = ["stride", "avg"]
[head]
hidden = [10]
[options]
batch_norm = [true]
dropout = [25]
""")
    assert got == ["16x16rgb/c6k3s2-bn-d10-bn-x25", "16x16rgb/c6k3-bn-a2-d10-bn-x25",
                   "16x16rgb/dw3s2-bn-c6k1-bn-d10-bn-x25",
                   "16x16rgb/dw3-bn-c6k1-bn-a2-d10-bn-x25"]


def test_gap_on_a_1x1_map_is_the_flatten_network():
    """When stages shrink the map to 1x1 the gap head is dropped (same network as flatten)."""
    got = texts("""
[input]
sizes = [4]
modes = ["gray"]
[stages]
count = [2]
filters = [3]
[head]
kind = ["gap", "flatten"]
""")
    assert got == ["4x4gray/c3k3-p2-c3k3-p2"]


def test_misfits_are_skipped_and_an_all_misfit_space_is_an_error():
    """Combinations that pool a map below 1x1 are left out; none left raises SpaceError."""
    fits = texts('[input]\nspecs = ["4x4gray"]\n[stages]\ncount = [1, 3]\nfilters = [2]')
    assert fits == ["4x4gray/c2k3-p2"]  # three p2 would need at least 8x8
    with pytest.raises(SpaceError, match=r"no combination of the space fits its input; the "
                                         r"first problem: .*pool size 2 is larger than the "
                                         r"map 1x1"):
        texts('[input]\nspecs = ["4x4gray"]\n[stages]\ncount = [3]\nfilters = [2]')


def test_per_stage_choices_widening_and_shared():
    """Per-stage filter lists with widening, per-stage kernels when not shared."""
    got = texts("""
[input]
specs = ["8x8gray"]
[stages]
count = [2]
filters = [[4, 8], [4, 8]]
kernel = [[3], [1, 3]]
shared = ["conv", "pool"]
""")
    # widening drops (8, 4); stage 2 tries kernel 1 and 3
    assert got == ["8x8gray/c4k3-p2-c4k1-p2", "8x8gray/c4k3-p2-c4k3-p2",
                   "8x8gray/c4k3-p2-c8k1-p2", "8x8gray/c4k3-p2-c8k3-p2",
                   "8x8gray/c8k3-p2-c8k1-p2", "8x8gray/c8k3-p2-c8k3-p2"]


def test_width_plans():
    """widths: n stages take the first n widths of each plan; duplicates collapse."""
    got = texts("""
[input]
specs = ["8x8gray"]
[stages]
count = [1, 2]
widths = [[4, 8], [4, 16]]
""")
    assert got == ["8x8gray/c4k3-p2", "8x8gray/c4k3-p2-c8k3-p2", "8x8gray/c4k3-p2-c16k3-p2"]


@pytest.mark.parametrize("name", ["demo", "demo-quick", "blocks"])
def test_shipped_spaces_are_unique_valid_and_deterministic(name):
    """Every shipped space: unique texts that parse back to the same Arch, same order twice."""
    space = load_space(f"builtin:{name}")
    first, second = enumerate_space(space), enumerate_space(space)
    assert first == second
    names = [str(a) for a in first]
    assert len(set(names)) == len(names)
    assert all(parse(t) == a for t, a in zip(names, first))
    assert len(first) <= space.size_bound()
    # the standard library reads the shipped file too
    assert tomllib.loads(builtin_space_text(name))["budget"]["max_flash_kb"] == 256


def test_demo_space_has_the_variety_and_size_the_demo_needs():
    """The demo space: 30-80 survivors with dense, 1-3 stages, depthwise, gap and flatten."""
    space = load_space("builtin:demo")
    assert space.budget == Budget(70_000, 1_000_000, 32, 256, 50, "cortex-m4", 80)
    result = filter_budget(enumerate_space(space), space.budget, 8)
    assert 30 <= len(result.survivors) <= 80
    names = [str(a) for a in result.survivors]
    stages = {t.count("p2") for t in names}
    assert stages == {0, 1, 2, 3}
    assert any("/" not in t for t in names) and any(t.endswith("/d64") for t in names)
    assert any("dw3" in t for t in names) and any(t.endswith("-gap") for t in names)
    assert any("c4k3" in t for t in names) and any("c32k" in t for t in names)
    assert {str(a.input) for a in result.survivors} == {"32x32rgb", "16x16gray"}
    assert all(v > 0 for v in result.over.values())  # each budget removes something
    assert sum(t.macs < 1_000_000 for t in result.totals if t.arch in set(names)) == len(names)


def test_documented_example_reads_and_its_worked_text_comes_out():
    """The example file in the module docstring reads; its worked stage example is produced."""
    import search.space as module
    doc = module.__doc__
    block = doc[doc.index("    format = 1"):doc.index("What a stage is")]
    space = load_space("\n".join(line[4:] for line in block.splitlines()))
    assert space.counts == (0, 1, 2) and space.budget.max_peak_kb == 32
    assert len(enumerate_space(space)) <= space.size_bound()
    got = texts('[input]\nspecs = ["32x32rgb"]\n[stages]\ncount = [2]\nfilters = [[8], [16]]\n'
                'conv = ["depthwise"]\n[head]\nkind = ["gap"]\nhidden = [32]\n[options]\n'
                'batch_norm = [true]')
    assert got == ["32x32rgb/dw3-bn-c8k1-bn-p2-dw3-bn-c16k1-bn-p2-gap-d32-bn"]
    assert "dw3-bn-c8k1-bn-p2-dw3-bn-c16k1-bn-p2-gap-d32-bn" in doc


# ---------------------------------------------------------------- reading errors


@pytest.mark.parametrize("text, message", [
    ("[input]\nsizes = [8]\nmodes = ['gray']\n[stage]\ncount = [1]",
     "<text>: unknown key stage; known keys in the top level: format, description, input, "
     "stages, head, options, budget"),
    ("[input]\nsizes = [8]\nmodes = ['gray']\n[stages]\nfilter = [8]",
     r"unknown key stages.filter; known keys in \[stages\]: count, filters, widths, kernel"),
    ("[input]\nsizes = [8]\nmodes = ['gray', 'cmyk']",
     r"input.modes = \['gray', 'cmyk'\]: 'cmyk' is not a colour mode \(rgb, gray, ycc, hsv\)"),
    ("[input]\nsizes = [0]\nmodes = ['gray']", r"input.sizes = \[0\]: 0 is not a side"),
    ("[input]\nsizes = [8]", "missing key input.modes"),
    ("[input]\nspecs = ['8x8grey']", r"input.specs = \['8x8grey'\]: '8x8grey' is not an "
                                     "input spec"),
    ("[input]\nspecs = ['8x8gray']\nsizes = [8]", "gives specs and also sizes/modes"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [1]\nfilters = [8]\nkernel = [4]",
     r"stages.kernel = \[4\]: 4 is not an odd kernel size 1..31"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [true]",
     r"stages.count = \[True\]: True is not an integer 0..8"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [1, 1]\nfilters = [8]",
     "lists a choice twice; give each once"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [2]",
     "give exactly one of stages.filters"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [2]\nwidths = [[8]]",
     r"stages.widths\[0\] = \[8\]: has 1 stages but stages.count goes up to 2"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [2]\nfilters = [[8], [8], [8]]",
     "gives choices for 3 stages but stages.count goes up to 2"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [2]\nfilters = [8]\n"
     "conv = [['standard'], ['depthwise']]",
     "is given per stage, so it cannot be in stages.shared"),
    ("[input]\nspecs = ['8x8gray']\n[stages]\ncount = [1]\nfilters = [8]\npool = ['min']",
     r"stages.pool = \['min'\]: 'min' is not one of max, avg, none, stride"),
    ("[input]\nspecs = ['8x8gray']\n[head]\nkind = 'gap'",
     r"head.kind = 'gap': must be a non-empty list, each item one of gap, flatten \(write "
     r"\[x\] for a single choice\)"),
    ("[input]\nspecs = ['8x8gray']\n[options]\ndropout = [100]",
     r"options.dropout = \[100\]: 100 is not a percent 0..99"),
    ("format = 2\n[input]\nspecs = ['8x8gray']", "reads format 1 only"),
    ("[input\nspecs = 3", "<text>: not valid TOML"),
])
def test_reading_errors_name_key_value_and_rule(text, message):
    """Each bad file names the key, shows the value and states the rule."""
    with pytest.raises(SpaceError, match=message):
        load_space(text)


def test_errors_name_the_file_and_builtin_names(tmp_path: Path):
    """A file's path appears in its errors; an unknown builtin lists the shipped ones."""
    path = tmp_path / "space.toml"
    path.write_text("[input]\nspecs = ['8x8gray']\n[head]\nhidden = [-1]\n", encoding="utf-8")
    with pytest.raises(SpaceError, match=f"{path}: head.hidden = \\[-1\\]"):
        load_space(path)
    with pytest.raises(SpaceError, match="builtin:nope: no such space shipped; known: "
                                         "builtin:blocks, builtin:demo, builtin:demo-quick"):
        load_space("builtin:nope")
    path.write_text("[input]\nspecs = ['8x8gray']\n", encoding="utf-8")
    assert load_space(str(path)).source == str(path)
    assert isinstance(SpaceError("x"), InputError)


# ---------------------------------------------------------------- budgets


def test_budget_values_are_checked():
    """Budget values must be positive numbers (integers for params/MACs); None is no limit."""
    with pytest.raises(BudgetError, match="budget max_params = -5: must be a positive "
                                          "integer; leave it out"):
        Budget(max_params=-5)
    with pytest.raises(BudgetError, match="budget max_macs = 1.5: must be a positive integer"):
        Budget(max_macs=1.5)
    with pytest.raises(BudgetError, match="budget max_peak_kb = 'big': must be a positive "
                                          "number of KB"):
        dataclasses.replace(Budget(), max_peak_kb="big")
    with pytest.raises(BudgetError, match=r"<text>: budget max_flash_kb = 0"):
        load_space("[input]\nspecs = ['8x8gray']\n[budget]\nmax_flash_kb = 0")
    assert Budget().limits() == {}
    assert Budget(max_peak_kb=1.5, max_macs=10).limits() == {"max_macs": 10,
                                                             "max_peak_kb": 1536.0}


def test_filter_reports_what_each_budget_removed():
    """Hand-checked counts: one candidate over params and flash, one over MACs."""
    candidates = [parse(t) for t in ("8x8gray", "8x8gray/c64k3", "8x8gray/c4k3-c4k3-c4k3")]
    # 8x8gray: 64*3+3 = 195 params, 192 MACs; c64k3: 9*64+64 + 4096*3+3 = 12,931
    # params, 64*9*64 + 4096*3 = 49,152 MACs; the third: 40 + 148 + 148 + 771 =
    # 1,107 params and 64*(36 + 144 + 144) + 768 = 21,504 MACs
    budget = Budget(max_params=2_000, max_macs=20_000, max_flash_kb=4)
    result = filter_budget(candidates, budget, 3)
    assert [str(a) for a in result.survivors] == ["8x8gray"]
    assert result.over == {"max_params": 1, "max_macs": 2, "max_flash_kb": 1}
    assert result.n_removed == 2 and result.within == (True, False, False)
    assert result.summary() == ("3 candidates, 1 within budget; over max_params: 1, "
                                "over max_macs: 2, over max_flash_kb: 1")
    table = result.table()
    assert list(table["over"]) == ["", "max_params,max_macs,max_flash_kb", "max_macs"]
    assert list(table["params"]) == [195, 12_931, 1_107]


def test_nothing_survives_names_the_closest_candidate():
    """BudgetError names the candidate nearest to fitting and each figure against its limit."""
    candidates = [parse(t) for t in ("8x8gray/c64k3", "8x8gray", "8x8rgb")]
    # 8x8gray, 3 classes: 64*3 + 3 = 195 params; peak 2*64 = 128 B = 0.125 KB;
    # flash 256 + 192 + 12*3 = 484 B = 0.47 KB
    with pytest.raises(BudgetError, match=r"no candidate of 3 fits the budget \(over "
                                          r"max_params: 3\); the closest, '8x8gray', costs "
                                          r"params 195 \(max 100: over\), MACs 192 \(no "
                                          r"limit\), peak 0.1 KB \(no limit\), flash 0.5 KB "
                                          r"\(no limit\); raise the budgets marked over"):
        filter_budget(candidates, Budget(max_params=100), 3)
    with pytest.raises(BudgetError, match="no candidates to filter"):
        filter_budget([], Budget(), 3)


POOL = [parse(t) for t in texts("""
[input]
specs = ["16x16rgb", "8x8gray"]
[stages]
count = [0, 1, 2]
filters = [4, 16]
conv = ["standard", "depthwise"]
pool = ["max", "stride"]
[head]
kind = ["gap", "flatten"]
hidden = [0, 24]
[options]
batch_norm = [false, true]
""")]
FIGURES = {str(a): {c: cost_of(a, c) for c in (2, 5, 10)} for a in POOL}


@settings(max_examples=60, deadline=None)
@given(st.sampled_from([2, 5, 10]),
       st.one_of(st.none(), st.integers(50, 20_000)),
       st.one_of(st.none(), st.integers(100, 200_000)),
       st.one_of(st.none(), st.floats(0.5, 8.0)),
       st.one_of(st.none(), st.floats(0.5, 16.0)))
def test_filter_never_lets_an_over_budget_candidate_through(k, params, macs, peak, flash):
    """Survivors fit every budget by an independent cost; the removed exceed one; counts match."""
    budget = Budget(params, macs, peak, flash)
    limits = {"max_params": params, "max_macs": macs, "max_peak_kb": peak,
              "max_flash_kb": flash}

    def over(arch) -> set[str]:
        c = FIGURES[str(arch)][k]
        figures = {"max_params": c.params, "max_macs": c.macs,
                   "max_peak_kb": c.peak_int8_bytes / 1024, "max_flash_kb": c.flash_bytes / 1024}
        return {n for n, lim in limits.items() if lim is not None and figures[n] > lim}

    expected = [a for a in POOL if not over(a)]
    if not expected:
        with pytest.raises(BudgetError, match="no candidate of"):
            filter_budget(POOL, budget, k)
        return
    result = filter_budget(POOL, budget, k)
    assert list(result.survivors) == expected
    for name in budget.limits():
        assert result.over[name] == sum(name in over(a) for a in POOL)


# ---------------------------------------------------------------- subsampling


def test_subsample_is_seeded_ordered_and_without_repeats():
    """Same seed, same subset; original order kept; no repeats; all kept when few."""
    pool = POOL
    a, b = subsample(pool, 10, seed=3), subsample(pool, 10, seed=3)
    assert a == b and len(a) == 10 and len({str(x) for x in a}) == 10
    index = {str(x): i for i, x in enumerate(pool)}
    assert [index[str(x)] for x in a] == sorted(index[str(x)] for x in a)
    assert subsample(pool, 10, seed=4) != a
    assert subsample(pool, len(pool) + 5, seed=0) == list(pool)
    assert enumerate_space(load_space("builtin:demo"), max_candidates=7, seed=1) == \
        subsample(enumerate_space(load_space("builtin:demo")), 7, seed=1)
    with pytest.raises(InputError, match="max candidates must be a positive integer, got 0"):
        subsample(pool, 0)


_VALUES = st.recursive(
    st.one_of(st.booleans(), st.integers(-3, 70), st.floats(-1, 70, allow_nan=False),
              st.sampled_from(["rgb", "gray", "8x8", "8x8gray", "standard", "depthwise",
                               "max", "avg", "none", "stride", "gap", "flatten", "kernel",
                               "conv", "pool", ""])),
    lambda inner: st.lists(inner, max_size=4), max_leaves=8)
_TABLES = {"input": ["sizes", "modes", "specs"],
           "stages": ["count", "filters", "widths", "kernel", "conv", "pool", "pool_window",
                      "shared", "widening", "colour"],
           "head": ["kind", "hidden"], "options": ["batch_norm", "dropout"],
           "budget": ["max_params", "max_macs", "max_peak_kb", "max_flash_kb"]}


@st.composite
def space_data(draw) -> dict:
    """Random tables of known (and a few unknown) keys with values of any TOML shape."""
    data: dict = {"input": {"specs": ["8x8gray"]}} if draw(st.booleans()) else {}
    for table, keys in _TABLES.items():
        if draw(st.booleans()):
            chosen = draw(st.lists(st.sampled_from(keys), max_size=4, unique=True))
            data[table] = {k: draw(_VALUES) for k in chosen}
    return data


@settings(max_examples=100, deadline=None)
@given(space_data())
def test_fuzz_space_files_raise_only_our_errors(data):
    """Any mix of keys and values gives a Space or a SpaceError/BudgetError, nothing else."""
    from search.space_read import _space_from_data
    try:
        space = _space_from_data(data, "", "<fuzz>")
    except (SpaceError, BudgetError) as exc:
        assert str(exc).startswith("<fuzz>: ")
        return
    if space.size_bound() > 500:  # keep the test quick; big spaces are tested above
        return
    try:
        candidates = enumerate_space(space)
    except SpaceError as exc:
        assert "no combination of the space fits its input" in str(exc)
        return
    assert len({str(a) for a in candidates}) == len(candidates)
