"""The report's CSV tables: plain, machine-readable copies of what the page shows."""

from __future__ import annotations

from pathlib import Path
from typing import Mapping

import pandas as pd

# file name -> what it holds (listed on the page)
TABLE_FILES: dict[str, str] = {
    "ranking.csv": "the ranking, one row per candidate (as computed by the search's ranking)",
    "folds.csv": "per-fold held-out and training accuracy of every ranked candidate",
    "per_class.csv": "the pick's per-class images, predictions, precision and recall",
    "confusion_counts.csv": "the pick's confusion matrix over all held-out folds (rows: true class)",
    "confusions.csv": "the pick's most frequent confusions",
    "mistakes.csv": "the pick's most confident mistakes, with data set index and path",
    "budgets.csv": "each budget of the run beside the pick's value",
}


def confusion_frame(counts, classes) -> pd.DataFrame:
    """The confusion matrix as a frame: index true class, columns predicted class."""
    return pd.DataFrame(counts, index=pd.Index(list(classes), name="true \\ predicted"),
                        columns=list(classes))


def write_tables(out_dir: Path, tables: Mapping[str, pd.DataFrame]) -> list[Path]:
    """Write each frame to ``out_dir/<name>``; only names in :data:`TABLE_FILES`.

    The confusion matrix keeps its index (the true class); the others do not.
    Floats are written with full precision so they can be checked against the
    ranking exactly.
    """
    written = []
    for name, frame in tables.items():
        if name not in TABLE_FILES:
            raise ValueError(f"unknown report table {name!r}; known: {', '.join(TABLE_FILES)}")
        path = Path(out_dir) / name
        frame.to_csv(path, index=(name == "confusion_counts.csv"))
        written.append(path)
    return written
