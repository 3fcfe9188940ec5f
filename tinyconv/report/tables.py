"""The report's CSV tables: plain, machine-readable copies of what the page shows."""

from __future__ import annotations

from pathlib import Path
from typing import Mapping

import pandas as pd

from tinyconv.files import write_bytes_whole

#: What to do after a failed report write, for the error message.
REPORT_AGAIN = "write the report again (tinyconv report RUN_DIR, or --out ANOTHER_FOLDER)"

# file name -> what it holds (listed on the page)
TABLE_FILES: dict[str, str] = {
    "ranking.csv": "the ranking, one row per candidate (as computed by the search's ranking)",
    "folds.csv": "per-fold held-out and training accuracy of every ranked candidate",
    "per_class.csv": "the pick's per-class images, predictions, precision and recall",
    "confusion_counts.csv": "the pick's confusion matrix over all held-out folds (rows: true class)",
    "confusions.csv": "the pick's most frequent confusions",
    "mistakes.csv": "the pick's most confident mistakes, with data set index and path",
    "budgets.csv": "each budget of the run beside the pick's value",
    "pick_cost.csv": "the pick's cost per step of the int8 network (and the device model's "
                     "time when the run names a core)",
    "structures.csv": "per size class, the best candidate of each structure and colour mode, "
                      "and which won (when the run compared more than one)",
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
        text = frame.to_csv(index=(name == "confusion_counts.csv")).encode("utf-8")
        written.append(write_bytes_whole(Path(out_dir) / name, text, then=REPORT_AGAIN))
    return written
