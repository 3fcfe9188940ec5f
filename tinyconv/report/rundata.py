"""What a report is made from, as plain values (no store, no files)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from search.ranking import Ranking


@dataclass(frozen=True)
class PickPredictions:
    """The pick's held-out predictions over all folds at its ranked rung.

    Attributes
    ----------
    fold, index, label, pred : ndarray, shape (n,), int
        Fold of each prediction, index of the image in the data set, true and
        predicted class.
    probs : ndarray, shape (n, K), float
        Predicted class probabilities.
    """

    fold: np.ndarray
    index: np.ndarray
    label: np.ndarray
    pred: np.ndarray
    probs: np.ndarray

    @property
    def confidence(self) -> np.ndarray:
        """Probability given to the predicted class, shape (n,)."""
        return self.probs[np.arange(self.pred.size), self.pred]


@dataclass(frozen=True)
class RunData:
    """Everything the page shows, read from one run folder.

    Attributes
    ----------
    run_dir : the run folder
    config : the run's configuration (``RunStore.config()``)
    classes : class names, length K
    ranking : the ranking table (``search.rank.rank_run``)
    units : every unit of the run (``RunStore.units()``)
    predictions : the pick's held-out predictions, or None when not stored
    images : the data set's images (n, h, w, c) uint8, or None when the data
        could not be reloaded (then ``notices`` says why)
    paths : the data set's image paths, when it came from a folder
    candidates : every candidate of the space with its costs and
        ``within_budget`` (``RunStore.candidates()``), when known
    removed : budget name -> candidates of the space it removed
    outcome : how the last search session ended (``RunStore.outcome()``), if known
    notices : plain sentences about what the report had to leave out
    device : the export's device measurement (``export/device.json``), when made
    rank_by : the order of the ranking's groups (``per_param`` or ``accuracy``)
    export : the export's summary (``export/summary.json``), when the run was exported
    """

    run_dir: Path
    config: dict[str, Any]
    classes: tuple[str, ...]
    ranking: pd.DataFrame
    units: pd.DataFrame
    predictions: PickPredictions | None = None
    images: np.ndarray | None = None
    paths: tuple[str, ...] | None = None
    candidates: pd.DataFrame | None = None
    removed: dict[str, int] = field(default_factory=dict)
    outcome: dict[str, Any] | None = None
    notices: tuple[str, ...] = field(default=())
    device: dict[str, Any] | None = None
    rank_by: str = "per_param"
    export: dict[str, Any] | None = None

    @property
    def chance(self) -> float:
        """Chance accuracy 1/K."""
        return 1.0 / len(self.classes)

    @property
    def ranked(self) -> Ranking:
        """The ranking as a value (:class:`search.ranking.Ranking`)."""
        return Ranking(self.ranking)

    @property
    def pick(self) -> pd.Series:
        """The ranking row of the pick."""
        return self.ranked.pick

    @property
    def best(self) -> pd.Series:
        """The finalist with the highest mean held-out accuracy (fewer parameters on ties)."""
        return self.ranked.best

    @property
    def finalists(self) -> pd.DataFrame:
        """Ranking rows at the highest rung (those that take part in the pick)."""
        return self.ranked.finalists


def fold_scores(ranking: pd.DataFrame, units: pd.DataFrame) -> pd.DataFrame:
    """Per-fold accuracies of each ranked candidate at the rung it was ranked on.

    Returns
    -------
    DataFrame with candidate, params, rung, epochs, fold, held_acc, train_acc,
    finalist; ordered by parameters, then candidate, then fold.
    """
    done = units[units["status"] == "done"]
    parts = []
    for _, row in ranking.iterrows():
        sel = done[(done["candidate"] == row["candidate"]) & (done["rung"] == row["rung"])]
        part = sel[["candidate", "rung", "epochs", "fold", "held_acc", "train_acc"]].copy()
        part["params"] = int(row["params"])
        part["finalist"] = bool(row.get("finalist", True))
        parts.append(part)
    if not parts:
        return pd.DataFrame(columns=["candidate", "params", "rung", "epochs", "fold",
                                     "held_acc", "train_acc", "finalist"])
    out = pd.concat(parts, ignore_index=True)
    out = out[["candidate", "params", "rung", "epochs", "fold", "held_acc", "train_acc",
               "finalist"]]
    return out.sort_values(["params", "candidate", "fold"], kind="stable").reset_index(drop=True)
