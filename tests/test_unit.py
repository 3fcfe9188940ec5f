"""Tests of search/unit.py: one work unit trains, evaluates and reports honestly."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import accuracy_score, log_loss

from search.folds import assign_folds
from search.unit import UnitData, UnitTask, run_unit
from tinyconv.data import load_data

TRAINING = (("batch_size", 16), ("lr", 0.01))


@pytest.fixture(scope="module")
def data():
    ds = load_data("builtin:tiles?n=6&size=8&seed=1")
    return UnitData(ds.images, ds.labels, assign_folds(ds.labels, 3, seed=0))


def _task(cand="8x8gray/c4k3-p2", fold=1, epochs=2, seed=11, training=TRAINING):
    return UnitTask(cand, fold, 0, epochs, seed, 8, training)


def test_done_unit_reports_held_out_fold(data):
    """A finished unit predicts exactly the held-out fold; its accuracy matches scikit-learn's."""
    r = run_unit(_task(), data)
    assert r.status == "done", r.message
    held = np.flatnonzero(data.folds == 1)
    np.testing.assert_array_equal(r.index, held)
    np.testing.assert_array_equal(r.label, data.labels[held])
    assert r.probs.shape == (held.size, 8) and r.probs.dtype == np.float32
    np.testing.assert_allclose(r.probs.sum(axis=1), 1.0, atol=1e-5)
    np.testing.assert_array_equal(r.pred, r.probs.argmax(axis=1))
    # Reference: scikit-learn's accuracy_score and log_loss on the kept predictions.
    assert r.held_acc == pytest.approx(accuracy_score(r.label, r.pred))
    p64 = r.probs.astype(np.float64)
    assert r.held_loss == pytest.approx(log_loss(r.label, p64 / p64.sum(axis=1, keepdims=True),
                                                labels=range(8)), rel=1e-4)
    assert len(r.history["train_loss"]) == 2 and len(r.history["held_acc"]) == 2
    assert r.cpu_s > 0 and r.wall_s > 0
    assert 0.0 <= r.train_acc <= 1.0


def test_same_task_same_result(data):
    """The same task gives bit-identical probabilities; another seed does not."""
    a, b = run_unit(_task(), data), run_unit(_task(), data)
    np.testing.assert_array_equal(a.probs, b.probs)
    c = run_unit(_task(seed=12), data)
    assert not np.array_equal(a.probs, c.probs)


def test_diverged_unit_keeps_no_predictions(data):
    """A huge learning rate diverges: status diverged, the epoch named, no accuracy kept."""
    r = run_unit(_task(cand="8x8gray/d32", epochs=3,
                       training=(("lr", 1e30), ("optimizer", "sgd"))), data)
    assert r.status == "diverged"
    assert "not finite in epoch" in r.message and "smaller learning rate" in r.message
    assert r.held_acc is None and r.probs.size == 0


def test_failed_unit_reports_message(data):
    """A unit that cannot run becomes 'failed' with the reason, and does not raise."""
    r = run_unit(_task(cand="8x8gray/c4k4"), data)
    assert r.status == "failed"
    assert "ArchError" in r.message and "even" in r.message


def test_normalisation_uses_training_part_only(data, monkeypatch):
    """The normalisation statistics are fitted on the training folds only."""
    import importlib
    # the module where normalise_fold finds it (tinyconv.data.normalise is also a function)
    tdata = importlib.import_module("tinyconv.data.normalise")
    seen = []
    real = tdata.fit_normalisation

    def spy(x):
        seen.append(x.shape[0])
        return real(x)

    monkeypatch.setattr(tdata, "fit_normalisation", spy)
    run_unit(_task(fold=2, epochs=1), data)
    assert seen == [int((data.folds != 2).sum())]


def test_unit_data_round_trip(tmp_path, data):
    """UnitData saved as .npy files loads back (memory-mapped) with equal arrays."""
    data.save(tmp_path)
    back = UnitData.load(tmp_path)
    np.testing.assert_array_equal(np.asarray(back.images), data.images)
    np.testing.assert_array_equal(back.folds, data.folds)
    assert isinstance(back.images, np.memmap)
