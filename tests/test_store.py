"""Tests of search/store.py and search/config.py: round trip, refusal, atomic units."""

from __future__ import annotations

import sqlite3

import numpy as np
import pandas as pd
import pytest

from search.config import SearchSettings, differences, parse_duration
from search.store import FILE, RunStore
from search.unit import UnitResult, UnitTask
from tinyconv.errors import InputError, RunError


def _settings(**change) -> dict:
    base = dict(data="builtin:tiles?n=10", fingerprint="abc123", classes=("ring", "bar", "dot"),
                n_images=30, space="[input]\nsizes = [8]\nmodes = [\"gray\"]\n", folds=3,
                seed=1, eta=3, top_epochs=3, budget={"max_params": 5000},
                training={"lr": 0.001, "batch_size": 16})
    base.update(change)
    return SearchSettings(**base).as_dict()


def _candidates() -> pd.DataFrame:
    return pd.DataFrame({"candidate": ["8x8gray", "8x8gray/c4k3", "8x8gray/c64k3-d512"],
                         "params": [195, 807, 2_400_000], "macs": [192, 2_500, 9_000_000],
                         "peak_int8_bytes": [100, 400, 9000], "flash_bytes": [1000, 2000, 10**7],
                         "within_budget": [True, True, False],
                         "over": ["", "", "max_params"]})


def _result(cand="8x8gray/c4k3", fold=0, rung=0, status="done", m=4, k=3) -> UnitResult:
    rng = np.random.default_rng(fold)
    probs = rng.dirichlet(np.ones(k), size=m).astype(np.float32)
    task = UnitTask(cand, fold, rung, 1, seed=99, n_classes=k)
    if status != "done":
        return UnitResult(task, status, "loss not finite", cpu_s=0.5, wall_s=0.6,
                          history={"train_loss": [], "train_acc": [], "held_loss": [],
                                   "held_acc": []})
    return UnitResult(task, "done", "", 0.9, 0.3, 0.75, 0.6, 1.25, 1.5,
                      {"train_loss": [0.3], "train_acc": [0.9], "held_loss": [0.6],
                       "held_acc": [0.75]},
                      np.arange(fold, fold + 3 * m, 3), rng.integers(0, k, m),
                      probs.argmax(1), probs)


def test_round_trip(tmp_path):
    """Settings, candidates, units and predictions come back as they were written."""
    settings = _settings()
    store = RunStore.start(tmp_path, settings, _candidates(), {"max_params": 1})
    results = [_result(fold=f) for f in range(3)]
    for r in results:
        store.record(r)
    store.record(_result(cand="8x8gray", fold=0, status="diverged"))
    again = RunStore(tmp_path)
    assert again.config() == settings
    assert again.removed() == {"max_params": 1}
    cands = again.candidates()
    assert cands["candidate"].tolist() == _candidates()["candidate"].tolist()
    assert cands["within_budget"].tolist() == [True, True, False]
    units = again.units()
    assert len(units) == 4
    assert set(again.units(status="diverged")["candidate"]) == {"8x8gray"}
    row = units[(units.candidate == "8x8gray/c4k3") & (units.fold == 1)].iloc[0]
    assert row.held_acc == 0.75 and row.cpu_s == 1.25 and row.epochs == 1
    assert row.history == results[1].history_json()
    preds = again.predictions("8x8gray/c4k3")
    assert preds["fold"].tolist() == [0] * 4 + [1] * 4 + [2] * 4
    np.testing.assert_array_equal(preds["index"], np.concatenate([r.index for r in results]))
    np.testing.assert_array_equal(preds["pred"], np.concatenate([r.pred for r in results]))
    probs = again.prediction_probs("8x8gray/c4k3")
    assert probs.dtype == np.float32 and probs.shape == (12, 3)
    np.testing.assert_array_equal(probs, np.concatenate([r.probs for r in results]))
    assert again.predictions("8x8gray").empty
    assert again.spent() == (pytest.approx(1.25 * 3 + 0.5), 4)


def test_refuses_other_settings(tmp_path):
    """A folder started with 3 folds refuses 5 folds, naming both values and the fix."""
    RunStore.start(tmp_path, _settings(), _candidates())
    with pytest.raises(RunError, match=r"folds: 3 in the run folder, 5 now(.|\n)*"
                                       r"Use another --out folder"):
        RunStore.start(tmp_path, _settings(folds=5), _candidates())


def test_refuses_other_data(tmp_path):
    """Other data (another fingerprint) is refused, saying it is other data."""
    RunStore.start(tmp_path, _settings(), _candidates())
    with pytest.raises(RunError, match=r"data fingerprint: abc123 \(data 'builtin:tiles\?n=10'\)"
                                       r" in the run folder, ffff \(data 'x.npz'\) now: "
                                       r"it is other data"):
        RunStore.start(tmp_path, _settings(fingerprint="ffff", data="x.npz"), _candidates())


def test_refuses_other_training_setting(tmp_path):
    """A nested setting (the learning rate) that differs is named with its key path."""
    RunStore.start(tmp_path, _settings(), _candidates())
    with pytest.raises(RunError, match=r"training.lr: 0.001 in the run folder, 0.1 now"):
        RunStore.start(tmp_path, _settings(training={"lr": 0.1, "batch_size": 16}),
                       _candidates())


def test_same_settings_resume_and_budget_may_change(tmp_path):
    """The same settings reopen the store; a new CPU budget is accepted and recorded."""
    RunStore.start(tmp_path, _settings(budget_cpu_s=60.0), _candidates()).record(_result())
    store = RunStore.start(tmp_path, _settings(budget_cpu_s=120.0), _candidates())
    assert store.config()["budget_cpu_s"] == 120.0
    assert len(store.units()) == 1
    assert len(store.candidates()) == 3


def test_unit_is_unique(tmp_path):
    """Writing the same (candidate, fold, rung) twice fails and leaves one row."""
    store = RunStore.start(tmp_path, _settings(), _candidates())
    store.record(_result())
    with pytest.raises(sqlite3.IntegrityError):
        store.record(_result())
    assert len(store.units()) == 1
    assert len(store.predictions("8x8gray/c4k3")) == 4


def test_unit_and_predictions_one_transaction(tmp_path):
    """A unit whose predictions cannot be written leaves no unit row behind."""
    store = RunStore.start(tmp_path, _settings(), _candidates())
    bad = _result()
    object.__setattr__(bad, "probs", np.zeros(3, np.float32))  # 1-d: no (n, K) shape
    with pytest.raises(IndexError):
        store.record(bad)
    assert store.units().empty
    store.record(_result())
    assert len(store.units()) == 1


def test_missing_store(tmp_path):
    """Opening a folder without a run says so and what to give instead."""
    with pytest.raises(RunError, match="no run here .no run.sqlite.; give the folder a search"):
        RunStore(tmp_path)
    assert not (tmp_path / FILE).exists()


def test_differences_ignore_record_only_keys():
    """The data path and the time/epoch budgets are not compared; the rest is."""
    a, b = _settings(), _settings(data="elsewhere/same.npz", budget_cpu_s=10.0)
    assert differences(a, b) == []
    assert differences(a, _settings(seed=2)) == ["seed: 1 in the run folder, 2 now"]


@pytest.mark.parametrize("text,seconds", [("90s", 90), ("20m", 1200), ("1h", 3600),
                                          ("1h30m", 5400), ("2.5m", 150), ("45", 45)])
def test_parse_duration(text, seconds):
    """Durations in s, m, h and combinations are read as seconds."""
    assert parse_duration(text) == seconds


@pytest.mark.parametrize("text", ["", "m", "20 minutes", "-5s", "0s", "1d"])
def test_parse_duration_refuses(text):
    """Anything but a positive duration is refused, showing the accepted forms."""
    with pytest.raises(InputError, match="write e.g. 90s, 20m, 1h|more than zero"):
        parse_duration(text)


def test_settings_validation():
    """Unusable settings are refused naming the option that sets them."""
    with pytest.raises(InputError, match="folds must be an integer >= 2, got 1; set --folds"):
        SearchSettings(data="d", fingerprint="f", classes=("a", "b"), n_images=2, space="",
                       folds=1)
