"""Time per image as a budget: the filter, the space file, the command line, the ranking."""

import dataclasses
import json

import pytest

from search.budget import Budget, filter_budget
from search.space import enumerate_space, load_space
from tinyconv.arch import parse
from tinyconv.cli import main
from tinyconv.device.cores import CORES
from tinyconv.device.model import estimate, time_ms
from tinyconv.errors import BudgetError

ARCHS = [parse(t) for t in ("16x16gray/c8k3-p2-gap", "16x16gray/c32k3-p2-c32k3-p2-gap",
                            "32x32gray/c32k3-p2-c32k3-p2-gap", "16x16gray/d16")]


def test_time_budget_keeps_exactly_the_networks_the_model_times_within_it():
    """max_ms filters by the device model's milliseconds at the budget's core and clock."""
    times = {str(a): time_ms(a, 4, "cortex-m4", 48.0) for a in ARCHS}
    limit = sorted(times.values())[1] + 1e-6  # the two fastest fit
    f = filter_budget(ARCHS, Budget(max_ms=limit, core="cortex-m4", clock_mhz=48), 4)
    assert {str(a) for a in f.survivors} == {t for t, ms in times.items() if ms <= limit}
    assert len(f.survivors) == 2 and f.over == {"max_ms": 2}
    assert [t.ms for t in f.totals] == [pytest.approx(times[str(a)]) for a in ARCHS]
    # the time is instructions x the core's cycles per instruction / clock
    est = estimate(ARCHS[1], 4, "cortex-m4")
    assert times[str(ARCHS[1])] == pytest.approx(est.instructions * 1.3 / 48e3, rel=1e-6)


def test_faster_clock_fits_more():
    """The same budget at twice the clock keeps more networks: half the slowest time at
    40 MHz keeps everything at 80 MHz and not the slowest at 40 MHz."""
    limit = max(time_ms(a, 4, "cortex-m4", 40.0) for a in ARCHS) / 2 + 1e-9
    slow = filter_budget(ARCHS, Budget(max_ms=limit, core="cortex-m4", clock_mhz=40), 4)
    fast = filter_budget(ARCHS, Budget(max_ms=limit, core="cortex-m4", clock_mhz=80), 4)
    assert len(fast.survivors) == len(ARCHS)
    assert set(slow.survivors) <= set(fast.survivors)
    assert len(fast.survivors) > len(slow.survivors)


def test_time_budget_needs_a_core():
    """max_ms or clock_mhz without a core is refused with the fix."""
    with pytest.raises(BudgetError, match=r"max_ms = 5 needs a core.*--core cortex-m4"):
        Budget(max_ms=5)
    with pytest.raises(BudgetError, match="clock_mhz = 80 needs a core"):
        Budget(clock_mhz=80)
    with pytest.raises(BudgetError, match="max_ms = -1: must be a positive number of ms"):
        Budget(max_ms=-1, core="m4")


def test_space_file_device_table(tmp_path):
    """[device] core and clock_mhz and [budget] max_ms are read from a space file."""
    path = tmp_path / "space.toml"
    path.write_text('format = 1\n[input]\nspecs = ["16x16gray"]\n[stages]\ncount = [1, 2]\n'
                    'widths = [[8, 16], [32, 32]]\n[budget]\nmax_ms = 30\n'
                    '[device]\ncore = "cortex-m7"\nclock_mhz = 216\n')
    space = load_space(str(path))
    assert (space.budget.core, space.budget.clock_mhz, space.budget.max_ms) == \
        ("cortex-m7", 216.0, 30)
    f = filter_budget(enumerate_space(space), space.budget, 5)
    assert all(t.ms <= 30 for t, ok in zip(f.totals, f.within) if ok)
    path.write_text(path.read_text().replace('core = "cortex-m7"', 'core = "cortex-m0"'))
    with pytest.raises(Exception, match="core 'cortex-m0' is not supported"):
        load_space(str(path))


def test_search_refuses_a_time_budget_without_a_core(tmp_path, capsys):
    """search --max-ms without a core: exit 2 before any training."""
    code = main(["search", "builtin:tiles?n=6&size=16", "--space", "builtin:demo-quick",
                 "--out", str(tmp_path / "run"), "--max-ms", "5", "--core", "cortex-m9"])
    assert code == 2
    assert "core 'cortex-m9' is not supported" in capsys.readouterr().err


def test_cost_command_shows_instructions_and_ms(capsys):
    """cost --core --clock-mhz: per-layer instructions and ms, and the totals."""
    assert main(["cost", "16x16gray/c8k3-p2-c16k3-p2-gap", "--classes", "4",
                 "--core", "cortex-m33", "--clock-mhz", "64"]) == 0
    out = capsys.readouterr().out
    est = estimate("16x16gray/c8k3-p2-c16k3-p2-gap", 4, "cortex-m33")
    assert f"{est.instructions:,} per image (model)" in out
    assert "ms @64MHz" in out
    assert f"{est.ms(CORES['cortex-m33'], 64):.2f} ms per image" in out
    assert main(["cost", "16x16gray/c8k3-gap", "--core", "m4", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)["device"]
    assert data["core"] == "cortex-m4" and data["ms"] > 0
    assert sum(s["instructions"] for s in data["steps"]) == pytest.approx(data["instructions"],
                                                                          rel=0.01)
    assert main(["cost", "c8k3", "--clock-mhz", "80"]) == 2
    assert "--clock-mhz needs --core" in capsys.readouterr().err


def test_demo_space_names_its_device():
    """The demo's space times candidates on a Cortex-M4 at 80 MHz; its time budget removes
    nothing the other budgets keep."""
    space = load_space("builtin:demo")
    f = filter_budget(enumerate_space(space), space.budget, 8)
    assert space.budget.device() == {"core": "cortex-m4", "clock_mhz": 80.0}
    nodevice = filter_budget(enumerate_space(space), dataclasses.replace(
        space.budget, max_ms=None, core=None, clock_mhz=None), 8)
    assert f.survivors == nodevice.survivors
