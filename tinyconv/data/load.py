"""One entry point for every kind of data a command takes.

``spec`` is one of:

* a folder with one sub-folder per class (:mod:`.folder`);
* a ``.npz`` file with ``x``, ``y`` and optionally ``classes`` (:mod:`.arrays`);
* ``builtin:tiles`` — the workshop-tile demo set (:mod:`.tiles`), with
  options as a query string: ``builtin:tiles?n=100&size=32&seed=0``
  (``n`` images per class, default 100; ``size`` side in pixels, default 32;
  ``seed``, default 0);
* ``builtin:digits`` — scikit-learn's bundled digits (:mod:`.digits`).
"""

from __future__ import annotations

from pathlib import Path
from urllib.parse import parse_qsl

from tinyconv.errors import DataError

from . import tiles
from .arrays import load_arrays
from .dataset import Dataset, Intake
from .digits import SPEC as DIGITS_SPEC, load_digits
from .folder import survey_folder
from .survey import Survey, fold_problems, refusal
from .validate import find_duplicates

TILES_DEFAULTS = {"n": 100, "size": 32, "seed": 0}
_KINDS = ("a folder with one sub-folder per class, a .npz file with arrays x and y, "
          "builtin:tiles[?n=100&size=32&seed=0] or builtin:digits")


def _tiles_options(query: str, spec: str) -> dict[str, int]:
    options = dict(TILES_DEFAULTS)
    for key, value in parse_qsl(query, keep_blank_values=True, strict_parsing=bool(query)):
        if key not in options:
            raise DataError(f"{spec!r}: unknown option {key!r}; builtin:tiles takes "
                            f"{', '.join(TILES_DEFAULTS)} (e.g. builtin:tiles?n=100&size=32&seed=0)")
        try:
            options[key] = int(value)
        except ValueError:
            raise DataError(f"{spec!r}: option {key}={value!r} must be a whole number") from None
    return options


def survey(spec: str | Path, *, skip_bad: bool = False, folds: int | None = None) -> Survey:
    """What ``spec`` holds and every problem that stops a search (:mod:`.survey`).

    An image folder is read whole, whatever its problems, so that all of them
    are found in one pass; arrays and built-in sets are loaded (their faults
    of form are raised at once: nothing can be listed before them), then
    checked against ``folds``.

    Raises
    ------
    DataError
        When the source cannot be read at all (no such path, no class
        sub-folders, malformed arrays).
    """
    text = str(spec)
    if not text.startswith("builtin:") and Path(spec).is_dir():
        return survey_folder(Path(spec), skip_bad=skip_bad, folds=folds)
    ds, intake = _load(spec, skip_bad)
    counts = tuple(int(n) for n in ds.class_counts)
    return Survey(ds.source, ds.classes, counts, (), ds, intake, ds.warnings,
                  tuple(fold_problems(ds.labels, folds, ds.classes)))


def load_with_intake(spec: str | Path, *, skip_bad: bool = False,
                     folds: int | None = None) -> tuple[Dataset, Intake]:
    """Like :func:`load_data`, also returning what was seen on the way in."""
    found = survey(spec, skip_bad=skip_bad, folds=folds)
    if found.problems:
        raise refusal(found)
    assert found.dataset is not None
    return found.dataset, found.intake


def _load(spec: str | Path, skip_bad: bool) -> tuple[Dataset, Intake]:
    """A built-in set or a .npz (or a folder, refusing it at its problems)."""
    text = str(spec)
    if text.startswith("builtin:"):
        name, _, query = text[len("builtin:"):].partition("?")
        if name == "tiles":
            try:
                opts = _tiles_options(query, text)
            except ValueError as exc:  # parse_qsl's strict parsing
                raise DataError(f"{text!r}: options must look like n=100&size=32&seed=0 "
                                f"({exc})") from None
            ds = tiles.make_tiles(opts["n"], size=opts["size"], seed=opts["seed"])
            within, across = find_duplicates(ds.images, ds.labels)
            s = opts["size"]
            return ds, Intake(((f"{s}x{s}", ds.n),), (("RGB", ds.n),), tuple(within),
                              tuple(across))
        if name == "digits":
            if query:
                raise DataError(f"{text!r}: builtin:digits takes no options; write "
                                f"{DIGITS_SPEC}")
            return load_digits()
        raise DataError(f"{text!r}: unknown built-in data set {name!r}; the built-in sets "
                        "are builtin:tiles and builtin:digits")
    path = Path(spec)
    if path.is_dir():
        found = survey_folder(path, skip_bad=skip_bad)
        if found.problems:
            raise refusal(found)
        return found.dataset, found.intake  # type: ignore[return-value]
    if path.is_file():
        if path.suffix.lower() == ".npz":
            return load_arrays(path)
        raise DataError(f"{text}: a file of type {path.suffix or '(none)'!r} is not a data "
                        f"set; give {_KINDS}")
    raise DataError(f"{text}: no such file or folder; give {_KINDS}")


def load_data(spec: str | Path, *, skip_bad: bool = False, folds: int | None = None) -> Dataset:
    """Load and validate a data set.

    Parameters
    ----------
    spec : str or Path
        A folder, a ``.npz`` file, ``builtin:tiles[?n=..&size=..&seed=..]`` or
        ``builtin:digits`` (see the module docstring).
    skip_bad : bool
        For folders: skip unreadable images instead of refusing the folder.
    folds : int, optional
        Also refuse classes too small for this many stratified folds, together
        with every other problem (a search passes its ``--folds``).

    Returns
    -------
    Dataset

    Raises
    ------
    DataError
        Whatever makes the data unusable, named with the file or array, the
        rule broken and the fix; every such problem of a folder in one error.
        Usable-but-doubtful data gives
        :class:`~tinyconv.data.dataset.DataWarning` warnings instead, also
        recorded in ``Dataset.warnings``.
    """
    return load_with_intake(spec, skip_bad=skip_bad, folds=folds)[0]
