"""The run's budgets beside the pick's numbers."""

from __future__ import annotations

import math
from typing import Any, Mapping

import pandas as pd

# budget key in the run config -> (what it limits, ranking column, factor from the
# config's unit to the column's unit, unit shown). Keys are matched as stored.
KNOWN: dict[str, tuple[str, str, float, str]] = {
    "max_params": ("parameters", "params", 1.0, "count"),
    "max_macs": ("multiply-accumulates per image", "macs", 1.0, "MACs"),
    "max_peak_kb": ("peak activation memory (int8)", "peak_kb", 1.0, "KB"),
    "max_flash_kb": ("flash (int8 weights, biases, scales, input table)", "flash_kb", 1.0, "KB"),
    "max_ms": ("time per image on the device (cost model)", "ms", 1.0, "ms"),
}
#: keys of the stored budget that name the device rather than limit anything
DEVICE_KEYS = ("core", "clock_mhz")


def budget_rows(budgets: Mapping[str, Any] | None, pick: pd.Series,
                removed: Mapping[str, Any] | None = None) -> pd.DataFrame:
    """One row per budget: name, limit, the pick's value, its share of the limit.

    Parameters
    ----------
    budgets : mapping of budget key to limit (``None`` or absent: no limit)
    pick : the pick's ranking row
    removed : budget name -> how many candidates of the space it removed

    Returns
    -------
    DataFrame with budget, limits, unit, limit, pick, share (pick / limit), within,
    removed.
    Budgets of unknown keys are listed with their limit and no comparison.
    """
    rows = []
    for key, limit in (budgets or {}).items():
        if limit is None or key in DEVICE_KEYS:
            continue
        try:
            lim = float(limit)
        except (TypeError, ValueError):
            rows.append({"budget": key, "limits": "(not a number)", "unit": "", "limit": math.nan,
                         "pick": math.nan, "share": math.nan, "within": None})
            continue
        if key in KNOWN:
            what, col, factor, unit = KNOWN[key]
            value = float(pick[col])
            lim_u = lim * factor
            rows.append({"budget": key, "limits": what, "unit": unit, "limit": lim_u,
                         "pick": value, "share": value / lim_u if lim_u > 0 else math.nan,
                         "within": bool(value <= lim_u)})
        else:
            rows.append({"budget": key, "limits": "(not compared by the report)", "unit": "",
                         "limit": lim, "pick": math.nan, "share": math.nan, "within": None})
    for row in rows:
        row["removed"] = int((removed or {}).get(row["budget"], 0))
    return pd.DataFrame(rows, columns=["budget", "limits", "unit", "limit", "pick", "share",
                                       "within", "removed"])


def axis_budget(budgets: Mapping[str, Any] | None, column: str) -> float | None:
    """The budget on a ranking column (``params`` or ``macs``), in its unit, if any."""
    for key, limit in (budgets or {}).items():
        if key in KNOWN and KNOWN[key][1] == column and limit is not None:
            try:
                return float(limit) * KNOWN[key][2]
            except (TypeError, ValueError):
                return None
    return None
