"""The CPU forecast of a unit from the units that finished (search.cpu_forecast)."""

import pytest

from search.cpu_forecast import CpuForecast


def test_nothing_finished_means_no_forecast():
    """Before any unit finishes there is nothing to forecast from: None, so the loop runs it."""
    forecast = CpuForecast({"a": 100.0})
    assert forecast.unit("a", 3) is None
    assert forecast.total([("a", 3)]) is None


def test_own_rate_first_then_the_search_rate_per_mac_epoch():
    """A candidate's own CPU per epoch forecasts its next units; another candidate gets the
    search's CPU per MAC-epoch times its MACs; one without a cost gets none."""
    forecast = CpuForecast({"a": 100.0, "b": 300.0})
    forecast.add("a", 2, 4.0)           # 2 s an epoch, 0.02 s a MAC-epoch
    assert forecast.unit("a", 5) == pytest.approx(10.0)
    assert forecast.unit("b", 1) == pytest.approx(6.0)
    assert forecast.unit("c", 1) is None
    assert forecast.total([("a", 1), ("b", 2)]) == pytest.approx(2.0 + 12.0)
    assert forecast.total([("a", 1), ("c", 1)]) is None
    forecast.add("b", 1, 9.0)           # its own rate replaces the search's
    assert forecast.unit("b", 2) == pytest.approx(18.0)
