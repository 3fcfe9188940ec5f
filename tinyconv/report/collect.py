"""Read a run folder into :class:`~tinyconv.report.rundata.RunData`.

This is the one module of the report that knows the run store and the
ranking (``search``); everything after it works on plain values.
"""

from __future__ import annotations

import warnings

from pathlib import Path

import numpy as np

from search.rank import rank_run
from search.ranking import Ranking
from search.store import FILE, RunStore
from tinyconv.errors import RunError
from tinyconv.report.rundata import PickPredictions, RunData


def collect(run_dir: str | Path, rank_by: str | None = None) -> RunData:
    """Everything the report shows, from the run folder's store and data set.

    The data set is reloaded from the spec stored in the run's settings
    (:func:`tinyconv.data.load_data`) for the image galleries; when it cannot
    be loaded, or its fingerprint differs from the run's, the galleries are
    left out and ``notices`` says why (the rest of the report does not need
    the images). ``rank_by`` (``per_param`` or ``accuracy``) ranks in that
    order instead of the one the search was asked for.

    Raises
    ------
    RunError
        When the folder is missing, holds no store, or has no candidate
        finished on every fold yet.
    """
    run_dir = Path(run_dir)
    if not run_dir.exists():
        raise RunError(f"{run_dir}: no such run folder; give the folder a search wrote "
                       "with --out")
    if not run_dir.is_dir():
        raise RunError(f"{run_dir}: not a folder; give the run folder a search wrote with --out")
    if not (run_dir / FILE).is_file():
        raise RunError(f"{run_dir}: no run here (no {FILE}); give the folder a search wrote "
                       "with --out, or run the search first")
    with RunStore(run_dir) as store:
        config = store.config() or {}
        classes = tuple(str(c) for c in config.get("classes", ()))
        rank_by = rank_by or store.rank_order() or "per_param"
        ranking = rank_run(store, by=rank_by)
        if ranking.empty:
            n = len(store.units())
            raise RunError(f"{run_dir}: nothing to report yet: {n} units finished, and no "
                           f"candidate has finished all {config.get('folds', '?')} folds of a "
                           "rung; let the search run longer (it resumes in the same folder)")
        units = store.units()
        candidates = store.candidates()
        removed = {str(k): int(v) for k, v in (store.removed() or {}).items()}
        outcome = store.outcome()
        pick = Ranking(ranking).pick
        frame = store.predictions(pick["candidate"], int(pick["rung"]))
        probs = store.prediction_probs(pick["candidate"], int(pick["rung"]))
    predictions = None
    if len(frame):
        predictions = PickPredictions(fold=frame["fold"].to_numpy(np.int64),
                                      index=frame["index"].to_numpy(np.int64),
                                      label=frame["label"].to_numpy(np.int64),
                                      pred=frame["pred"].to_numpy(np.int64),
                                      probs=np.asarray(probs, dtype=np.float64))
    images, paths, notes = _images(config, predictions, run_dir)
    return RunData(run_dir=run_dir, config=config, classes=classes, ranking=ranking,
                   units=units, predictions=predictions, images=images, paths=paths,
                   candidates=candidates, removed=removed, outcome=outcome,
                   notices=tuple(notes), device=_device(run_dir), rank_by=rank_by,
                   export=_exported(run_dir))


def _exported(run_dir: Path) -> dict | None:
    """The export's summary (``export/summary.json``), if the run was exported."""
    import json

    try:
        data = json.loads((Path(run_dir) / "export" / "summary.json").read_text())
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and "arch" in data else None


def _device(run_dir: Path) -> dict | None:
    """The export's device measurement (``export/device.json``), if one was made."""
    import json

    path = Path(run_dir) / "export" / "device.json"
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and "instructions" in data else None


def _images(config: dict, predictions: PickPredictions | None, run_dir: Path
            ) -> tuple[np.ndarray | None, tuple[str, ...] | None, list[str]]:
    """The run's images for the galleries, or None with the reason.

    First the data set named in the settings, reloaded and checked against
    the run's fingerprint; failing that, the copy of the images the search
    keeps in the run folder for its workers (``search.unit.UnitData``),
    checked the same way.
    """
    if predictions is None:
        return None, None, []
    from tinyconv.data import fingerprint, load_data

    spec = config.get("data")
    stored = config.get("fingerprint")
    problem = None
    if not spec:
        problem = "the run's settings name no data set"
    else:
        try:
            with warnings.catch_warnings():  # the search reported them already
                warnings.simplefilter("ignore")
                data = load_data(spec, skip_bad=bool(config.get("skip_bad", False)))
        except (ValueError, OSError) as exc:
            problem = f"the data set {spec!r} could not be reloaded ({exc})"
        else:
            now = fingerprint(data)
            if stored and now != stored:
                problem = (f"the data set at {spec!r} has changed since the run (fingerprint "
                           f"{now[:12]} now, {str(stored)[:12]} in the run)")
            else:
                return _checked(data.images, data.paths, predictions, spec)
    kept = _kept_images(run_dir, config, stored)
    if kept is not None:
        images, _, notes = _checked(kept, None, predictions, "the run folder's copy")
        return images, None, [f"For the galleries: {problem}; they show the copy of the "
                              "images kept in the run folder, which matches the run."] + notes
    return None, None, [f"The image galleries are left out: {problem}, so its images would "
                        "not match the predictions. Make the data available as it was at the "
                        "same path and write the report again, or search again."]


def _kept_images(run_dir: Path, config: dict, stored: str | None) -> np.ndarray | None:
    """The images saved in the run folder by the search, if they match the fingerprint."""
    if not stored or not (run_dir / "images.npy").is_file():
        return None
    from search.unit import UnitData
    from tinyconv.data import fingerprint
    from tinyconv.data.dataset import Dataset

    try:
        kept = UnitData.load(run_dir)
        ds = Dataset(np.asarray(kept.images), np.asarray(kept.labels),
                     tuple(config.get("classes", ())))
    except (ValueError, OSError):
        return None
    return ds.images if fingerprint(ds) == stored else None


def _checked(images: np.ndarray, paths, predictions: PickPredictions, what: str
             ) -> tuple[np.ndarray | None, tuple[str, ...] | None, list[str]]:
    """The images when every prediction's index falls inside them."""
    if predictions.index.size and int(predictions.index.max()) >= len(images):
        return None, None, [f"The predictions point past the {len(images)} images of {what}, "
                            "so the galleries are left out."]
    return images, paths, []
