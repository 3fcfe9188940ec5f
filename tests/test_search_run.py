"""Tests of a whole search run in this process: plan, budgets, resume, divergence, refusal."""

from __future__ import annotations

import dataclasses
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from helpers import TINY_DATA, TINY_SPACE, tiny_request
from search.session import SearchRequest, run_search
from search.store import RunStore
from search.unit import run_unit
from tinyconv.errors import BudgetError, RunError

DATA, SPACE = TINY_DATA, TINY_SPACE
DIVERGING = "8x8gray/c4k3-p2"


def request(out: Path, **change) -> SearchRequest:
    return tiny_request(out, **{"workers": 0, **change})


def diverge_one(task, data):
    """Train one candidate with a huge SGD learning rate (through its training setting)."""
    if task.candidate == DIVERGING:
        task = dataclasses.replace(task, training=(("batch_size", 16), ("lr", 1e30),
                                                   ("optimizer", "sgd")))
    return run_unit(task, data)


@pytest.fixture(scope="module")
def finished(tmp_path_factory):
    out = tmp_path_factory.mktemp("run")
    summary = run_search(request(out))
    summary.ranking_bytes = summary.ranking_path.read_bytes()  # before later tests rewrite it
    return out, summary


def test_search_completes_and_ranks(finished):
    """The plan runs to the end; every ranked candidate has all folds at its rung."""
    out, summary = finished
    assert summary.outcome.state == "complete"
    store = RunStore(out)
    units = store.units()
    assert not units.duplicated(["candidate", "fold", "rung"]).any()
    # R = 3, eta = 3: bracket 1 starts all 6 at 1 epoch and keeps 2 for 3 epochs;
    # bracket 0 gives 2 more candidates 3 epochs (Li et al. 2018, sizes scaled to 6).
    per_rung = units.groupby("rung")["candidate"].nunique()
    assert per_rung.loc[0] == 6 and 2 <= per_rung.loc[1] <= 4
    assert set(units[units.rung == 0]["candidate"]) == set(store.candidates()["candidate"])
    table = summary.table
    assert table["pick"].sum() == 1 and table["finalist"].any()
    for row in table.itertuples():
        got = units[(units.candidate == row.candidate) & (units.rung == row.rung)]
        assert sorted(got["fold"]) == [0, 1, 2]
        assert row.acc_mean == pytest.approx(got["held_acc"].mean())
    on_disk = pd.read_csv(out / "ranking.csv")
    assert list(on_disk["candidate"]) == list(table["candidate"])


def test_resume_recomputes_nothing(finished):
    """Re-running the same search in its folder runs no unit and changes no row."""
    out, first = finished
    before = RunStore(out).units()
    again = run_search(request(out))
    assert again.outcome.units_run == 0
    pd.testing.assert_frame_equal(RunStore(out).units(), before)
    assert (out / "ranking.csv").read_bytes() == first.ranking_bytes


def test_refuses_other_settings(finished):
    """The same folder with other folds is refused, saying what differs and what to do."""
    out, _ = finished
    with pytest.raises(RunError, match=r"folds: 3 in the run folder, 4 now(.|\n)*another --out"):
        run_search(request(out, folds=4))
    with pytest.raises(RunError, match=r"data fingerprint: .* it is other data"):
        run_search(request(out, data="builtin:tiles?n=6&size=8&seed=2"))


def test_over_budget_never_trained(tmp_path):
    """Candidates over a device budget are stored as such and never trained."""
    summary = run_search(request(tmp_path, budgets={"max_params": 400}))
    store = RunStore(tmp_path)
    cands = store.candidates().set_index("candidate")
    over = set(cands.index[~cands["within_budget"]])
    assert over and over.isdisjoint(set(store.units()["candidate"]))
    assert (cands.loc[list(over), "params"] > 400).all()
    assert (cands.loc[list(over), "over"] == "max_params").all()
    assert summary.removed["max_params"] == len(over)
    assert store.config()["budget"]["max_params"] == 400


def test_nothing_fits_is_refused(tmp_path):
    """A budget nothing meets is a BudgetError before any training."""
    with pytest.raises(BudgetError):
        run_search(request(tmp_path, budgets={"max_params": 5}))
    assert not (tmp_path / "run.sqlite").exists()


def test_diverging_candidate_is_recorded(tmp_path):
    """A candidate whose loss diverges is stored as diverged; the search completes without it."""
    summary = run_search(request(tmp_path), work=diverge_one)
    assert summary.outcome.state == "complete" and summary.outcome.diverged >= 3
    units = RunStore(tmp_path).units()
    bad = units[units.candidate == DIVERGING]
    assert set(bad["status"]) == {"diverged"} and bad["held_acc"].isna().all()
    assert "not finite" in bad["message"].iloc[0]
    assert DIVERGING not in set(summary.table["candidate"])
    assert not summary.table.empty


def test_epoch_budget_stops_then_resume_finishes(tmp_path, finished):
    """An epoch budget stops the plan; resuming without it ends where an unbroken run ends."""
    summary = run_search(request(tmp_path, budget_epochs=7))
    assert summary.outcome.state == "budget_epochs"
    assert summary.outcome.epochs <= 7
    done = run_search(request(tmp_path))
    assert done.outcome.state == "complete"
    _, reference = finished
    assert (tmp_path / "ranking.csv").read_bytes() == reference.ranking_bytes


def test_cpu_budget_stops(tmp_path):
    """A CPU budget smaller than one unit stops after the first unit, and says so."""
    summary = run_search(request(tmp_path, budget_cpu_s=1e-6))
    assert summary.outcome.state == "budget_cpu"
    assert summary.outcome.units_run == 1
    assert RunStore(tmp_path).outcome()["state"] == "budget_cpu"


def one_second_an_epoch(task, data):
    """Train the unit, and report one CPU second an epoch (a fixed clock for the budget)."""
    return dataclasses.replace(run_unit(task, data), cpu_s=float(task.epochs))


def test_cpu_budget_is_not_passed_by_units_in_flight(tmp_path, monkeypatch):
    """Two units in flight at a time, one CPU second an epoch each, a budget of 4.5 s: the
    loop stops before a unit whose forecast (from the units that finished) would pass the
    budget, so the units it ran spent at most the budget. Counting only finished units, it
    would have started units while the ones in flight were already spending the rest."""
    from search.executors import InlineWorkers
    monkeypatch.setattr(InlineWorkers, "workers", 2)  # its futures come back finished
    summary = run_search(request(tmp_path, budget_cpu_s=4.5), work=one_second_an_epoch)
    units = RunStore(tmp_path).units()
    assert summary.outcome.state == "budget_cpu"
    assert units["cpu_s"].sum() <= 4.5
    assert units["cpu_s"].sum() >= 4.5 - units["cpu_s"].max()  # and stops no earlier than that


def test_resumed_cpu_budget_forecasts_from_the_stored_units(tmp_path, monkeypatch):
    """A search stopped by a CPU budget and resumed with a larger one forecasts its first
    units from the units already in the store: with two in flight, one CPU second an
    epoch, 2 s spent and a budget of 3.5 s, it runs one more unit, not two (4 s)."""
    from search.executors import InlineWorkers
    monkeypatch.setattr(InlineWorkers, "workers", 2)
    first = run_search(request(tmp_path, budget_cpu_s=2.5), work=one_second_an_epoch)
    assert first.outcome.state == "budget_cpu"
    assert RunStore(tmp_path).units()["cpu_s"].sum() == 2.0
    again = run_search(request(tmp_path, budget_cpu_s=3.5), work=one_second_an_epoch)
    assert again.outcome.state == "budget_cpu"
    assert RunStore(tmp_path).units()["cpu_s"].sum() == 3.0


def test_full_mode_shares_final_units(tmp_path, finished):
    """--full trains every candidate R epochs on all folds, with the final rung's seeds."""
    summary = run_search(request(tmp_path, full=True))
    units = RunStore(tmp_path).units()
    assert set(units["epochs"]) == {3} and set(units["rung"]) == {1}
    assert len(units) == 6 * 3
    assert summary.table["finalist"].all()
    out, _ = finished
    sh = RunStore(out).units()
    top = sh[sh.rung == 1].set_index(["candidate", "fold"])["held_acc"]
    full = units.set_index(["candidate", "fold"])["held_acc"]
    assert np.array_equal(full.loc[top.index].to_numpy(), top.to_numpy())


def test_rank_by_accuracy(finished):
    """--rank-by accuracy orders the rows of each group by mean held-out accuracy."""
    out, _ = finished
    summary = run_search(request(out, rank_by="accuracy"))
    assert summary.table["pick"].iloc[0]
    for _, rows in summary.table.groupby("group"):
        assert list(rows["acc_mean"]) == sorted(rows["acc_mean"], reverse=True)
        assert list(rows["rank_accuracy"]) == sorted(rows["rank_accuracy"])
    # The report and export call rank_run(store) and get the order asked for.
    from search.rank import rank_run
    assert list(rank_run(RunStore(out))["candidate"]) == list(summary.table["candidate"])
    run_search(request(out))
    table = rank_run(RunStore(out))
    for _, rows in table.groupby("group"):
        assert list(rows["rank_per_param"]) == sorted(rows["rank_per_param"])


def test_base_epochs_shapes_the_plan(tmp_path):
    """With the shortest rung at R there is one level: every unit trains R epochs."""
    run_search(request(tmp_path, top_epochs=3, base_epochs=3))
    units = RunStore(tmp_path).units()
    assert set(units["epochs"]) == {3} and set(units["rung"]) == {0}
    assert RunStore(tmp_path).config()["base_epochs"] == 3


def test_int8_scores_the_last_rung_only(tmp_path):
    """--int8 stores the int8 held-out accuracy of last-rung units and ranks its fold mean."""
    from search.rank import rank_run
    summary = run_search(request(tmp_path / "q", int8=True))
    with RunStore(summary.run_dir) as store:
        units = store.units(status="done")
        table = rank_run(store)
    last = units["epochs"] == units["epochs"].max()
    assert units.loc[last, "int8_acc"].notna().all()
    assert units.loc[~last, "int8_acc"].isna().all()
    assert units.loc[last, "int8_acc"].between(0, 1).all()
    # int8 tracks the float network (typically within a point; loose on these tiny nets)
    gap = (units.loc[last, "int8_acc"] - units.loc[last, "held_acc"]).abs()
    assert gap.mean() < 0.1, gap.describe()
    fin = table[table["finalist"]]
    for _, row in fin.iterrows():
        folds = units[last & (units["candidate"] == row.candidate)]["int8_acc"]
        assert row.int8_acc_mean == pytest.approx(folds.mean())
        assert row.int8_drop == pytest.approx(row.acc_mean - row.int8_acc_mean)
    # Without --int8 there are no int8 figures at all.
    plain = run_search(request(tmp_path / "p"))
    assert plain.table["int8_acc_mean"].isna().all()
    # The float results do not change when int8 is asked for.
    same = ["candidate", "acc_mean", "acc_se", "train_acc_mean"]
    pd.testing.assert_frame_equal(
        plain.table[same].sort_values("candidate").reset_index(drop=True),
        summary.table[same].sort_values("candidate").reset_index(drop=True))


def test_units_of_a_rung_start_longest_first(tmp_path):
    """Within a rung, units are submitted in decreasing MACs (longest-first scheduling)."""
    summary = run_search(request(tmp_path, full=True))
    units = RunStore(tmp_path).units().sort_values("unit_id")
    macs = summary.table.set_index("candidate")["macs"]
    order = macs.loc[units["candidate"]].to_numpy()
    assert len(set(order)) > 1                       # the tiny space has different costs
    assert all(a >= b for a, b in zip(order, order[1:]))
