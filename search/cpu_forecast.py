"""The CPU seconds a unit will take, forecast from the units that finished.

A CPU budget is a cap on the training CPU a search spends. The loop stops
before a unit whose forecast, added to what finished units spent and what the
units in flight are forecast to spend, would pass the cap; without forecasts a
search would learn it had passed the cap only when the units in flight (one a
worker) came back.

The forecast of a unit is its candidate's own CPU seconds per epoch over its
finished units, times the unit's epochs (a candidate's later rungs train the
same network longer, so this errs high: the per-unit set-up is spread over
more epochs); for a candidate with no finished unit, the search's CPU seconds
per MAC-epoch over every finished unit, times the candidate's MACs per image
and the unit's epochs. With nothing finished yet there is no forecast
(``None``), and the loop runs the unit: the first wave of units tells the
rest. A resumed search starts from the units already in its store.
"""

from __future__ import annotations

from typing import Iterable, Mapping


class CpuForecast:
    """Running sums of finished units' CPU seconds, per candidate and over all.

    Parameters
    ----------
    costs : mapping of candidate text to MACs per image
        Candidates missing from it have no forecast until one of their own
        units finishes.
    """

    def __init__(self, costs: Mapping[str, float]):
        self.costs = costs
        self._own: dict[str, list[float]] = {}   # candidate -> [cpu_s, epochs]
        self._cpu = 0.0                          # over finished units with a cost
        self._work = 0.0                         # their MACs per image x epochs

    def add(self, candidate: str, epochs: int, cpu_s: float) -> None:
        """A finished unit of ``candidate`` trained ``epochs`` in ``cpu_s`` CPU seconds."""
        own = self._own.setdefault(candidate, [0.0, 0.0])
        own[0] += cpu_s
        own[1] += epochs
        cost = self.costs.get(candidate, 0.0)
        if cost > 0:
            self._cpu += cpu_s
            self._work += cost * epochs

    def unit(self, candidate: str, epochs: int) -> float | None:
        """Forecast CPU seconds of a unit of ``candidate`` training ``epochs``, or None."""
        own = self._own.get(candidate)
        if own is not None and own[1] > 0:
            return own[0] / own[1] * epochs
        cost = self.costs.get(candidate, 0.0)
        if self._work > 0 and cost > 0:
            return self._cpu / self._work * cost * epochs
        return None

    def total(self, units: Iterable[tuple[str, int]]) -> float | None:
        """Forecast CPU seconds of all ``(candidate, epochs)`` units, or None if any has none."""
        total = 0.0
        for candidate, epochs in units:
            one = self.unit(candidate, epochs)
            if one is None:
                return None
            total += one
        return total
