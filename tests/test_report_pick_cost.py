"""The report's per-layer cost of the pick: the cost model's rows and the device model's time."""

from __future__ import annotations

import math

import pytest

from tinyconv.cost import cost_of
from tinyconv.device.cores import core_named
from tinyconv.device.model import estimate
from tinyconv.report.pick_cost import pick_cost_table

ARCH = "16x16gray/c8k3-p2-c16k3-p2-gap"


def test_rows_are_the_cost_models_and_the_peak_is_marked():
    """One row per cost row; the buffer column's largest value is the int8 peak, marked."""
    cost = cost_of(ARCH, 8)
    t = pick_cost_table(ARCH, 8)
    assert list(t["step"]) == [r.name for r in cost.rows]
    assert t["params"].sum() == cost.params and t["macs"].sum() == cost.macs
    assert t["flash_bytes"].sum() == cost.flash_bytes
    assert t["memory_bytes"].max() == cost.peak_int8_bytes
    assert list(t.loc[t["peak"], "step"]) == [cost.peak_op]
    assert t["instructions"].isna().all() and t["ms"].isna().all()


def test_the_device_models_time_per_step_adds_up_to_its_total():
    """With a core, each step's instructions and time come from the device model."""
    core = core_named("cortex-m4")
    est = estimate(ARCH, 8, core)
    t = pick_cost_table(ARCH, 8, "cortex-m4", 80.0)
    timed = t[t["instructions"].notna()]
    assert len(timed) == len(est.steps)
    assert timed["instructions"].sum() == pytest.approx(est.instructions, rel=1e-3)
    assert timed["ms"].sum() == pytest.approx(est.ms(core, 80.0), rel=1e-3)
    assert all(math.isnan(v) for v in t.loc[t["kind"] == "relu", "ms"])   # fused, no step
