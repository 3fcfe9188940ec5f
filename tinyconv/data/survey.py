"""What a data source holds, usable or not, and every problem that stops a search.

A loader that stopped at its first problem made the user fix one thing per
run: the unreadable files, then an empty class folder, then a class too
small for the folds. A :class:`Survey` is the whole picture from one pass:
the classes and how many usable images each has, the data set made of the
usable images (when there are any), and the list of *problems*, each of
which alone stops a search. :func:`refusal` turns the list into one error.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from tinyconv.errors import DataError

from .dataset import Dataset, Intake
from .validate import check_folds


@dataclass(frozen=True)
class Survey:
    """A data source as found.

    Attributes
    ----------
    source : what was read (a path or a ``builtin:`` spec)
    classes : every class found (a class folder with no usable image included)
    counts : usable images per class, in the order of ``classes``
    unreadable : (path, reason) of every file that could not be read
    dataset : the usable images as a data set, or None when there are none
    intake : what the loader saw (sizes, colour kinds, duplicates)
    notes : warnings and notes about usable-but-doubtful data, in order
    problems : every problem that stops a search, each a sentence with its fix
    """

    source: str
    classes: tuple[str, ...]
    counts: tuple[int, ...]
    unreadable: tuple[tuple[str, str], ...] = ()
    dataset: Dataset | None = None
    intake: Intake = field(default_factory=Intake)
    notes: tuple[str, ...] = ()
    problems: tuple[str, ...] = ()

    def unreadable_in(self, name: str) -> int:
        """Unreadable files in the folder of class ``name``."""
        from pathlib import Path
        return sum(Path(p).parent.name == name for p, _ in self.unreadable)


def fold_problems(labels: np.ndarray, folds: int | None,
                  classes: Sequence[str]) -> list[str]:
    """The classes too small for ``folds`` stratified folds, as a problem (none for None)."""
    if folds is None or labels.size == 0:
        return []
    try:
        check_folds(labels, folds, classes)
    except DataError as exc:
        return [str(exc)]
    return []


def refusal(survey: Survey) -> DataError:
    """One error listing every problem of ``survey`` (which must have some)."""
    problems = survey.problems
    if len(problems) == 1:
        return DataError(f"{survey.source}: {problems[0]}")
    listed = "".join("\n  - " + p.replace("\n", "\n    ") for p in problems)
    return DataError(f"{survey.source}: {len(problems)} problems stop a search on this data; "
                     f"fix them all, then run the command again:{listed}")
