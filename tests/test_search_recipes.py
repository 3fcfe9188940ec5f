"""A search whose space varies the training recipe: ranking, seeds, resume after a kill, export."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from helpers import TINY_DATA, tiny_request, units_stored
from search.recipes import parse_recipe, split_key, training_for
from search.session import run_search
from search.store import RunStore
from search.unit import UnitData, UnitTask, run_unit

# Two architectures x four recipes = eight candidates.
SPACE = """
[input]
sizes = [8]
modes = ["gray"]
[stages]
count = [1]
filters = [2, 4]
[head]
kind = ["flatten"]
[training]
augment = ["none", "shift1+mirror"]
lr = [0.01, 0.03]
"""


def request(out: Path, **change):
    """The tiny search on the recipe space; batch size from the command line, lr from the space."""
    return tiny_request(out, **{"space": SPACE, "training": {"batch_size": 16}, **change})


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    out = tmp_path_factory.mktemp("recipes")
    return out, run_search(request(out))


def test_recipes_are_ranked_beside_their_architectures(reference):
    """Every architecture-recipe pair is a candidate; the ranking carries arch and recipe."""
    out, summary = reference
    store = RunStore(out)
    recipes = store.config()["recipes"]
    assert recipes == ["aug=none copies=1 lr=0.01 wd=0 sched=constant",
                       "aug=none copies=1 lr=0.03 wd=0 sched=constant",
                       "aug=mirror+shift1 copies=1 lr=0.01 wd=0 sched=constant",
                       "aug=mirror+shift1 copies=1 lr=0.03 wd=0 sched=constant"]
    keys = store.candidates()["candidate"].tolist()
    assert len(keys) == 8 == len(set(keys))
    assert keys[:4] == [f"8x8gray/c2k3-p2 {r}" for r in recipes]
    table = summary.table
    for row in table.itertuples():
        assert row.candidate == f"{row.arch} {row.recipe}" and row.recipe in recipes
    assert table["pick"].sum() == 1 and summary.n_candidates == 8
    assert set(pd.read_csv(out / "ranking.csv")["recipe"]) == set(table["recipe"])


def test_recipes_of_one_architecture_share_unit_seeds(reference):
    """Units of one architecture, fold and rung have one seed whatever the recipe (paired)."""
    out, _ = reference
    units = RunStore(out).units()
    units["arch"] = [split_key(c)[0] for c in units["candidate"]]
    seeds = units.groupby(["arch", "fold", "rung"])["seed"].nunique()
    assert (seeds == 1).all()
    assert units.groupby(["arch", "fold", "rung"])["candidate"].nunique().max() > 1


def test_each_unit_was_trained_with_its_own_recipe(reference):
    """Rerunning stored units with their key's recipe gives their figures bit for bit,
    and the recipes of one architecture give different figures."""
    out, _ = reference
    store = RunStore(out)
    cfg = store.config()
    units = store.units(status="done")
    first = units[(units["rung"] == 0) & (units["fold"] == 1)].head(4)
    data = UnitData.load(out)
    accs = []
    for row in first.itertuples():
        training = training_for(cfg, row.candidate)
        assert {k: training[k] for k in ("augment", "lr")} == {
            k: v for k, v in parse_recipe(split_key(row.candidate)[1]).settings().items()
            if k in ("augment", "lr")}
        task = UnitTask(row.candidate, row.fold, row.rung, int(row.epochs), int(row.seed),
                        len(cfg["classes"]), tuple(sorted(training.items())))
        again = run_unit(task, data)
        assert again.held_loss == row.held_loss and again.status == "done"
        np.testing.assert_array_equal(
            again.probs, store.prediction_probs(row.candidate, 0)[
                store.predictions(row.candidate, 0)["fold"].to_numpy() == 1])
        accs.append(row.held_loss)
    assert len(set(accs)) == len(accs)


def test_export_trains_the_pick_with_its_own_recipe(reference, tmp_path):
    """The export retrains a candidate with its recipe and records it in network.npz and
    summary.json."""
    from tinyconv.workflows.export_pick import export_run
    from tinyconv.network import Network

    out, summary = reference
    table = summary.table
    chosen = table[table["recipe"].str.contains("mirror")].iloc[0]
    done = export_run(out, pick=chosen["candidate"], out_dir=tmp_path / "exp", calib=16)
    assert done.recipe == chosen["recipe"] and done.arch == chosen["arch"]
    meta = Network.load(tmp_path / "exp" / "network.npz").meta
    recipe = parse_recipe(chosen["recipe"])
    assert meta["recipe"] == chosen["recipe"]
    assert {k: meta["training"][k] for k in ("augment", "lr", "copies")} == {
        "augment": recipe.augment, "lr": recipe.lr, "copies": recipe.copies}
    assert meta["training"]["batch_size"] == 16
    written = json.loads((tmp_path / "exp" / "summary.json").read_text())
    assert written["recipe"] == chosen["recipe"]


@pytest.mark.slow
def test_killed_recipe_search_resumes_bit_identically(reference, tmp_path):
    """SIGKILL during a recipe search, then the same search: the same units and ranking."""
    ref, _ = reference
    space = tmp_path / "space.toml"
    space.write_text(SPACE)
    out = tmp_path / "run"
    cmd = [sys.executable, "-m", "tinyconv", "search", TINY_DATA, "--space", str(space),
           "--out", str(out), "--folds", "3", "--seed", "2", "--top-epochs", "3",
           "--workers", "1", "--batch-size", "16"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                            start_new_session=True, cwd=Path(__file__).resolve().parents[1])
    deadline = time.monotonic() + 120
    while units_stored(out / "run.sqlite") < 5 and proc.poll() is None \
            and time.monotonic() < deadline:
        time.sleep(0.02)
    alive = proc.poll() is None
    os.killpg(proc.pid, signal.SIGKILL)  # the search and its worker, no clean-up
    proc.wait()
    assert alive, "the search finished before it could be killed"
    stored = len(RunStore(out).units())
    again = run_search(request(out, space=str(space)))
    assert again.outcome.units_run == len(RunStore(ref).units()) - stored
    assert (out / "ranking.csv").read_bytes() == (ref / "ranking.csv").read_bytes()
    cols = ["candidate", "fold", "rung", "epochs", "status", "train_acc", "held_loss",
            "history", "seed"]
    assert RunStore(out).units()[cols].equals(RunStore(ref).units()[cols])


def test_report_shows_recipes_and_the_measure(reference, tmp_path):
    """The page shows an architecture and a recipe column, the pick's recipe, and which
    measure the one-SE pick minimised."""
    import shutil

    from tinyconv.report import write_report

    out, summary = reference
    copy = tmp_path / "run"
    shutil.copytree(out, copy)
    page = write_report(copy).read_text(encoding="utf-8")
    pick = summary.table[summary.table["pick"]].iloc[0]
    assert ">architecture<" in page and ">recipe<" in page
    assert f"Trained with the recipe {pick['recipe']}." in page
    assert "the fewest parameters among those whose mean held-out accuracy" in page
    assert "--simplest-by params" in page
