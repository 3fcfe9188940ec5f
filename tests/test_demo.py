"""Test of ``tinyconv demo --quick``: the whole job runs and prints the pick."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from search.store import RunStore
from tinyconv.cli import main


@pytest.mark.slow
def test_quick_demo_prints_pick(tmp_path, capsys):
    """The quick demo searches, reports, exports and prints the one-SE pick of its ranking."""
    out = tmp_path / "demo"
    assert main(["demo", "--quick", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    table = pd.read_csv(out / "ranking.csv")
    pick = table[table["pick"]].iloc[0]
    assert f"demo pick: {pick.candidate} ({100 * pick.acc_mean:.1f}% \u00b1 " in text
    # the report is written after the export: the int8 figures and the pick's costs per layer
    page = (out / "report.html").read_text(encoding="utf-8")
    exported = json.loads((out / "export" / "summary.json").read_text())
    assert exported["arch"] == pick.candidate
    assert f"{100 * exported['agreement']:.1f}% of {exported['n_eval']:,} images" in page
    assert '<section id="cost">' in page and "activation buffer (bytes)" in page
    assert (out / "export" / "tc.c").is_file()
    store = RunStore(out)
    # Only candidates within the demo's device budget were trained.
    cands = store.candidates().set_index("candidate")
    assert cands.loc[store.units()["candidate"].unique(), "within_budget"].all()
    assert store.outcome()["state"] == "complete"
