"""A tiny real run for the report tests, written through the run store's API.

Real units (``search.unit.run_unit``: real training, real held-out
predictions) on a small built-in tile set, two rungs on three folds, so the
report reads exactly what a search writes. Built once per test session.
"""

from __future__ import annotations

from pathlib import Path

from search.config import SearchSettings
from search.folds import assign_folds
from search.schedule import unit_seed
from search.space import Budget, filter_budget
from search.store import RunStore
from search.unit import UnitData, UnitTask, run_unit
from tinyconv.arch import parse
from tinyconv.data import fingerprint, load_data

DATA_SPEC = "builtin:tiles?n=12&size=16&seed=3"
CANDIDATES = ("16x16rgb/c4k3-p2-gap", "16x16rgb/c4k3-p2-c8k3-p2-gap", "16x16rgb/c6k3-p2",
              "16x16rgb/d12", "16x16rgb/c16k3-p2-c32k3-p2-d64")
# The last candidate is over the parameter budget: it is costed and stored, never trained.
BUDGET = Budget(max_params=20_000, max_flash_kb=64.0)
FOLDS = 3
RUNGS = ((0, 2, CANDIDATES[:4]), (1, 4, CANDIDATES[:3]))   # (rung, epochs, who)
TRAINING = {"batch_size": 16, "lr": 0.01}


def build_run(run_dir: Path) -> Path:
    """Write the run into ``run_dir`` (created) and return it."""
    data = load_data(DATA_SPEC)
    n_classes = len(data.classes)
    filtered = filter_budget([parse(c) for c in CANDIDATES], BUDGET, n_classes)
    settings = SearchSettings(
        data=DATA_SPEC, fingerprint=fingerprint(data), classes=tuple(data.classes),
        n_images=len(data.labels), space="# report test candidates\n" + "\n".join(CANDIDATES),
        space_source="tests/report_fixture.py", folds=FOLDS, seed=5, eta=3, top_epochs=4,
        budget={k: getattr(BUDGET, k) for k in ("max_params", "max_macs", "max_peak_kb",
                                                 "max_flash_kb")},
        training=dict(TRAINING))
    store = RunStore.start(run_dir, settings.as_dict(), filtered.table(), filtered.over)
    folds = assign_folds(data.labels, FOLDS, seed=5)
    unit_data = UnitData(data.images, data.labels, folds)
    unit_data.save(run_dir)          # as the search does, for its workers
    with store:
        for rung, epochs, who in RUNGS:
            for cand in who:
                for fold in range(FOLDS):
                    task = UnitTask(cand, fold, rung, epochs, unit_seed(5, cand, fold, rung),
                                    n_classes, tuple(sorted(TRAINING.items())))
                    store.record(run_unit(task, unit_data))
    return Path(run_dir)


_BUILT: dict[str, object] = {}


def shared_report(tmp_path_factory) -> tuple[Path, int, str]:
    """The run folder with its report written by ``tinyconv report DIR``, once per session.

    Returns (run folder, the command's exit code, what it printed).
    """
    if "run" not in _BUILT:
        import contextlib
        import io

        from tinyconv.cli import main

        run_dir = build_run(tmp_path_factory.mktemp("report_run") / "run")
        out = io.StringIO()
        with contextlib.redirect_stdout(out):
            code = main(["report", str(run_dir)])
        _BUILT["run"] = (run_dir, code, out.getvalue())
    return _BUILT["run"]  # type: ignore[return-value]
