"""Figures drawn once: a report written again over unchanged data reuses its PNGs."""

from __future__ import annotations

import dataclasses
import json
from datetime import datetime, timezone

import pytest

from tinyconv.report.reuse import KEY_NAME, figure_key
from tinyconv.report.writer import render_report

STAMP = datetime(2026, 1, 2, tzinfo=timezone.utc)


@pytest.fixture()
def run_data():
    from test_report_page import _run
    return _run(False)


def _count_drawings(monkeypatch) -> list[str]:
    """Record every figure actually rendered to PNG."""
    import tinyconv.report.assemble as assemble
    drawn: list[str] = []
    real = assemble.png_bytes

    def counting(fig):
        drawn.append(fig)
        return real(fig)

    monkeypatch.setattr(assemble, "png_bytes", counting)
    return drawn


def test_second_report_over_the_same_data_draws_nothing(run_data, tmp_path, monkeypatch):
    """A report written again from the same data reuses every PNG and gives the same page."""
    drawn = _count_drawings(monkeypatch)
    first = render_report(run_data, tmp_path, stamp=STAMP).read_bytes()
    assert drawn, "the first report draws its figures"
    kept = json.loads((tmp_path / KEY_NAME).read_text())
    assert kept["key"] == figure_key(run_data) and set(kept["figures"]) >= {"folds.png"}
    drawn.clear()
    second = render_report(run_data, tmp_path, stamp=STAMP).read_bytes()
    assert drawn == [] and second == first


def test_changed_data_or_a_changed_file_is_drawn_again(run_data, tmp_path, monkeypatch):
    """Other data redraw every figure; a figure file changed since is redrawn alone."""
    drawn = _count_drawings(monkeypatch)
    render_report(run_data, tmp_path, stamp=STAMP)
    every = len(drawn)
    drawn.clear()
    other = dataclasses.replace(run_data, rank_by="accuracy" if run_data.rank_by != "accuracy"
                                else "per_param")
    assert figure_key(other) != figure_key(run_data)
    render_report(other, tmp_path, stamp=STAMP)
    assert len(drawn) == every
    drawn.clear()
    (tmp_path / "folds.png").write_bytes(b"not the figure")
    render_report(other, tmp_path, stamp=STAMP)
    assert len(drawn) == 1
    assert (tmp_path / "folds.png").read_bytes().startswith(b"\x89PNG")
