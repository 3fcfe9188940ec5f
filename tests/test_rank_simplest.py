"""The one-standard-error pick by a chosen measure of simplicity (--simplest-by)."""

from __future__ import annotations

import pandas as pd
import pytest

from search import rank
from tinyconv.cli import main
from tinyconv.errors import InputError
from helpers import TINY_DATA, TINY_SPACE

# Three candidates within one SE of the best, each the simplest by another measure.
ACCS = {"small": [0.80, 0.84, 0.82], "lean": [0.81, 0.85, 0.80], "thin": [0.82, 0.80, 0.84],
        "best": [0.88, 0.80, 0.84], "poor": [0.50, 0.52, 0.51]}
COSTS = {  # params, macs, peak bytes, flash bytes
    "small": (100, 90_000, 8192, 9000), "lean": (400, 20_000, 6144, 8000),
    "thin": (300, 60_000, 2048, 4000), "best": (900, 99_000, 9216, 12000),
    "poor": (10, 1_000, 1024, 1000)}


def _units() -> pd.DataFrame:
    return pd.DataFrame([{"candidate": c, "fold": f, "rung": 0, "epochs": 9, "status": "done",
                          "held_acc": a, "train_acc": a + 0.05}
                         for c, accs in ACCS.items() for f, a in enumerate(accs)])


def _candidates() -> pd.DataFrame:
    return pd.DataFrame([{"candidate": c, "params": p, "macs": m, "peak_int8_bytes": r,
                          "flash_bytes": fl} for c, (p, m, r, fl) in COSTS.items()])


@pytest.mark.parametrize("measure, picked", [("params", "small"), ("macs", "lean"),
                                             ("ram", "thin"), ("flash", "thin")])
def test_pick_minimises_the_chosen_measure(measure, picked):
    """Among the candidates within one SE of the best, the pick has the least of the measure."""
    table = rank.rank_units(_units(), _candidates(), 4, 3, simplest_by=measure)
    t = table.set_index("candidate")
    assert set(t.index[t["within_1se"]]) == {"small", "lean", "thin", "best"}
    assert t.index[t["pick"]].tolist() == [picked]
    column = rank.SIMPLEST[measure]
    within = t[t["within_1se"]]
    assert within.at[picked, column] == within[column].min()


def test_ties_in_the_measure_go_to_fewer_parameters():
    """Two candidates with equal flash: the one with fewer parameters is picked."""
    cands = _candidates()
    cands.loc[cands["candidate"] == "small", "flash_bytes"] = 4000
    table = rank.rank_units(_units(), cands, 4, 3, simplest_by="flash")
    assert table[table["pick"]]["candidate"].tolist() == ["small"]
    best, pick, _ = rank.one_se_pick([0.9, 0.9], [0.01, 0.01], [5, 3], ["a", "b"], [1.0, 1.0])
    assert pick == 1


def test_ms_without_a_core_is_refused():
    """Picking by time with no device core is refused, saying what to give instead."""
    with pytest.raises(InputError, match=r"simplest by 'ms' needs the time per image on a "
                                         r"device, and this run names no core; search again "
                                         r"with --core CORE"):
        rank.rank_units(_units(), _candidates(), 4, 3, simplest_by="ms")
    with pytest.raises(ValueError, match=r"simplest by 'size': expected one of params, macs"):
        rank.rank_units(_units(), _candidates(), 4, 3, simplest_by="size")


def test_ms_uses_the_ranking_time_column():
    """With a core, the pick by ms is the candidate within one SE with the shortest
    modelled time (the ranking's ms column)."""
    texts = {"small": "16x16gray/c8k3-p2-gap", "lean": "8x8gray/c4k3-p2-gap",
             "thin": "16x16gray/c4k3-p2-c8k3-p2-gap", "best": "16x16gray/c16k3-p2-c16k3-p2",
             "poor": "8x8gray"}
    units = _units().replace({"candidate": texts})
    cands = _candidates().replace({"candidate": texts})
    table = rank.rank_units(units, cands, 4, 3, simplest_by="ms",
                            device={"core": "cortex-m4", "clock_mhz": 80.0})
    assert table["ms"].notna().all()
    within = table[table["within_1se"]]
    assert table[table["pick"]]["candidate"].tolist() == \
        [within.sort_values("ms")["candidate"].iloc[0]]


def test_cli_refuses_ms_without_a_core(tmp_path, capsys):
    """search --simplest-by ms on a space without a core exits 2 before any training."""
    space = tmp_path / "space.toml"
    space.write_text(TINY_SPACE)
    code = main(["search", TINY_DATA, "--space", str(space), "--out", str(tmp_path / "run"),
                 "--workers", "0", "--simplest-by", "ms"])
    assert code == 2
    err = capsys.readouterr().err
    assert "--simplest-by ms picks by the time per image on the device, and this run names " \
           "no core; give --core CORE" in err
    assert not (tmp_path / "run" / "run.sqlite").exists()
