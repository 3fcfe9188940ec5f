"""Device budgets: the limits a candidate must fit, and filtering by them.

A :class:`Budget` holds up to five limits (parameters, MACs, int8 peak
activation KB, int8 flash KB, milliseconds per image; ``None`` means no limit)
and the device the time is for (a core and its clock, from the space file's
``[device]`` table or ``--core`` / ``--clock-mhz``; the time is the device
model's, :mod:`tinyconv.device.model`). :func:`filter_budget`
costs every candidate with :func:`tinyconv.cost.totals_of` and keeps those
within every limit, counting what each limit removed. Budgets come from a
space file's ``[budget]`` table (:mod:`search.space`) or the command line.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np
import pandas as pd

from tinyconv.arch import Arch
from tinyconv.cost import KB, Totals, totals_of
from tinyconv.errors import BudgetError

# budget name -> (field of Totals, bytes per unit, name of the figure, unit shown)
_BUDGETS = {"max_params": ("params", 1, "params", ""), "max_macs": ("macs", 1, "MACs", ""),
            "max_peak_kb": ("peak_int8_bytes", KB, "peak", " KB"),
            "max_flash_kb": ("flash_bytes", KB, "flash", " KB"),
            "max_ms": ("ms", 1, "time", " ms")}


@dataclass(frozen=True)
class Budget:
    """Device limits a candidate must fit; ``None`` means no limit.

    Change one with :func:`dataclasses.replace` (e.g. from a command-line
    option); the new value is checked the same way. KB are 1,024 bytes; the
    peak is the int8 peak activation memory and the flash the int8 deployment
    layout of :mod:`tinyconv.cost`.

    Raises
    ------
    BudgetError
        For a value that is not a positive number (integers for params and MACs).
    """

    max_params: int | None = None
    max_macs: int | None = None
    max_peak_kb: float | None = None
    max_flash_kb: float | None = None
    max_ms: float | None = None
    core: str | None = None
    clock_mhz: float | None = None

    def __post_init__(self) -> None:
        if self.core is not None:
            from tinyconv.device.cores import core_named
            object.__setattr__(self, "core", core_named(self.core).name)
        if self.clock_mhz is not None:
            from tinyconv.device.cores import check_clock
            if self.core is None:
                raise BudgetError(f"clock_mhz = {self.clock_mhz!r} needs a core; set "
                                  "core in [device] or give --core")
            object.__setattr__(self, "clock_mhz", check_clock(self.clock_mhz))
        if self.max_ms is not None and self.core is None:
            raise BudgetError(f"budget max_ms = {self.max_ms!r} needs a core to time the "
                              "networks on; set core (and clock_mhz) in [device] or give "
                              "--core cortex-m4 --clock-mhz 80")
        for name in _BUDGETS:
            value = getattr(self, name)
            if value is None:
                continue
            integer = name in ("max_params", "max_macs")
            ok = (isinstance(value, (int, float)) and not isinstance(value, bool)
                  and np.isfinite(value) and value > 0
                  and (isinstance(value, int) or not integer))
            if not ok:
                kind = ("a positive integer" if integer else "a positive number of ms"
                        if name == "max_ms" else "a positive number of KB")
                raise BudgetError(f"budget {name} = {value!r}: must be {kind}; leave it "
                                  "out (None) for no limit")

    @property
    def clock(self) -> float | None:
        """The clock the time is computed at: the one set, or the core's assumed clock."""
        if self.core is None:
            return None
        from tinyconv.device.cores import core_named
        return self.clock_mhz if self.clock_mhz is not None else core_named(self.core).clock_mhz

    def device(self) -> dict:
        """``{"core": ..., "clock_mhz": ...}`` (both None without a core)."""
        return {"core": self.core, "clock_mhz": self.clock}

    def limits(self) -> dict[str, float]:
        """The set budgets: name -> limit in the unit of :class:`Totals` (bytes for KB)."""
        return {name: getattr(self, name) * _BUDGETS[name][1] for name in _BUDGETS
                if getattr(self, name) is not None}

    def over(self, totals: Totals) -> tuple[str, ...]:
        """Names of the budgets ``totals`` exceeds.

        A candidate the int8 exporter cannot write (batch norm not after a
        conv/dwconv/dense) has no known flash: it is over any flash budget.
        """
        out = []
        for name, limit in self.limits().items():
            if getattr(totals, _BUDGETS[name][0]) > limit or (
                    name == "max_flash_kb" and not totals.exportable):
                out.append(name)
        return tuple(out)

    def describe(self, totals: Totals) -> str:
        """Each figure of ``totals`` against its budget, e.g. ``MACs 1,200 (max 1,000: over)``."""
        parts = []
        for name, (attr, unit, label, suffix) in _BUDGETS.items():
            value = getattr(totals, attr)
            if value is None:
                continue  # no core: no time
            shown = (f"{value:,}" if unit == 1 and name != "max_ms" else
                     f"{value / unit:,.1f}") + suffix
            limit = getattr(self, name)
            if limit is None:
                parts.append(f"{label} {shown} (no limit)")
            else:
                verdict = "over" if name in self.over(totals) else "ok"
                parts.append(f"{label} {shown} (max {limit:,}{suffix}: {verdict})")
        return ", ".join(parts)


def budget_from_table(table: dict, source: str, device: dict | None = None) -> Budget:
    """A :class:`Budget` from a ``[budget]`` table and a ``[device]`` table (keys checked)."""
    try:
        return Budget(**table, **(device or {}))
    except BudgetError as exc:
        raise BudgetError(f"{source}: {exc}") from None


@dataclass(frozen=True)
class Filtered:
    """The outcome of :func:`filter_budget`.

    Attributes
    ----------
    survivors : tuple of Arch
        The candidates within every budget, in their original order.
    totals : tuple of Totals
        Cost figures of every candidate, in the original order.
    within : tuple of bool
        Per candidate: within every budget.
    over : dict
        Budget name -> how many candidates exceed it. A candidate over several
        budgets is counted under each, so the counts can add up to more than
        ``n_removed``.
    budget : Budget
    """

    survivors: tuple[Arch, ...]
    totals: tuple[Totals, ...]
    within: tuple[bool, ...]
    over: dict[str, int]
    budget: Budget

    @property
    def n_candidates(self) -> int:
        return len(self.totals)

    @property
    def n_removed(self) -> int:
        return self.n_candidates - len(self.survivors)

    def summary(self) -> str:
        """One line, e.g. ``120 candidates, 80 within budget; over max_macs: 30, ...``."""
        over = ", ".join(f"over {k}: {v}" for k, v in self.over.items())
        return (f"{self.n_candidates} candidates, {len(self.survivors)} within budget"
                + (f"; {over}" if over else ""))

    def table(self) -> pd.DataFrame:
        """One row per candidate: candidate, params, macs, peak_int8_bytes,
        flash_bytes, within_budget, over (the budget names, comma-joined)."""
        return pd.DataFrame({
            "candidate": [t.arch for t in self.totals],
            "params": [t.params for t in self.totals],
            "macs": [t.macs for t in self.totals],
            "peak_int8_bytes": [t.peak_int8_bytes for t in self.totals],
            "flash_bytes": [t.flash_bytes for t in self.totals],
            "within_budget": list(self.within),
            "over": [",".join(self.budget.over(t)) for t in self.totals]})


def filter_budget(candidates: Sequence[Arch], budget: Budget, n_classes: int) -> Filtered:
    """Keep the candidates that fit every budget, and count what each budget removed.

    Parameters
    ----------
    candidates : sequence of Arch
    budget : Budget
    n_classes : int
        Classes of the data set (the head's size counts in every figure).

    Raises
    ------
    BudgetError
        When no candidate survives: names the candidate closest to fitting (the
        smallest largest ratio of figure to limit) and its figures against every
        budget, so that one knows which limit to raise or what to shrink.
    """
    if not candidates:
        raise BudgetError("no candidates to filter: the space yields none")
    limits = budget.limits()
    cache: dict = {}
    totals = tuple(totals_of(a, n_classes, cache) for a in candidates)
    if budget.core is not None:
        from dataclasses import replace

        from tinyconv.device.model import time_ms
        totals = tuple(replace(t, ms=time_ms(a, n_classes, budget.core, budget.clock))
                       for a, t in zip(candidates, totals))
    over_each = [budget.over(t) for t in totals]
    within = tuple(not o for o in over_each)
    counts = {name: sum(name in o for o in over_each) for name in limits}
    survivors = tuple(a for a, ok in zip(candidates, within) if ok)
    if not survivors:
        def worst(t: Totals) -> float:
            return max(getattr(t, _BUDGETS[n][0]) / lim for n, lim in limits.items())
        best = min(totals, key=worst)
        over = ", ".join(f"{k}: {v}" for k, v in counts.items() if v)
        raise BudgetError(
            f"no candidate of {len(totals)} fits the budget (over {over}); the closest, "
            f"{best.arch!r}, costs {budget.describe(best)}; raise the budgets marked "
            "over or add smaller choices to the space")
    return Filtered(survivors, totals, within, counts, budget)
