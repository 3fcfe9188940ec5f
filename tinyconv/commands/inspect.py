"""``tinyconv inspect DATA``: what is in a data set before searching on it.

Always prints the inventory first (the classes with their usable images, and
unreadable files per class), then what the images are like (sizes, colour
kinds, duplicates, the most stratified folds), then the notes, then every
problem that would stop a search, all found in one pass
(:func:`tinyconv.data.survey`). With ``--folds K`` a class smaller than K is
one of those problems; without it, a class of fewer than 2 images (no number
of folds works). Exit 0 when nothing stops a search, 2 when something does
(the last line, on stderr, says so) or when the data cannot be read at all.
"""

from __future__ import annotations

import argparse
import sys
import warnings

import numpy as np

from tinyconv.data import Survey, fingerprint, survey
from tinyconv.data.dataset import DataWarning
from tinyconv.data.validate import max_folds

#: Folds every search needs at least (a class with fewer images stops any search).
LEAST_FOLDS = 2


def configure(parser: argparse.ArgumentParser) -> None:
    """Add this command's arguments."""
    parser.add_argument("data", metavar="DATA",
                        help="a folder with one sub-folder per class, a .npz file (x, y), "
                             "builtin:tiles[?n=100&size=32&seed=0] or builtin:digits")
    parser.add_argument("--skip-bad", action="store_true",
                        help="count unreadable images as skipped (as search --skip-bad "
                             "would) instead of as a problem")
    parser.add_argument("--folds", type=int, default=None, metavar="K",
                        help="also check that K stratified folds are possible")


def _counts(pairs: tuple[tuple[str, int], ...]) -> str:
    return ", ".join(f"{name} ({count})" for name, count in pairs) or "none"


def inventory(found: Survey) -> list[str]:
    """The classes with their usable images (and unreadable files, when any)."""
    ds = found.dataset
    width = max([len("class")] + [len(name) for name in found.classes])
    lines = [f"data: {found.source}"]
    if ds is not None:
        h, w, c = ds.image_shape
        lines.append(f"images: {ds.n} usable in {len(found.classes)} classes, stored as "
                     f"{h}x{w} {'grey' if c == 1 else 'RGB'} (uint8)")
    else:
        lines.append(f"images: none usable in {len(found.classes)} classes")
    bad = bool(found.unreadable)
    lines += ["", f"{'class'.ljust(width)}  images" + ("  unreadable" if bad else "")]
    for name, n in zip(found.classes, found.counts):
        lines.append(f"{name.ljust(width)}  {n:6d}"
                     + (f"  {found.unreadable_in(name):10d}" if bad else ""))
    return lines


def description(found: Survey) -> list[str]:
    """Sizes, colour kinds, duplicates, the most folds and the fingerprint."""
    ds, intake = found.dataset, found.intake
    lines = ["", f"sizes seen: {_counts(intake.sizes)}",
             f"colour kinds: {_counts(intake.kinds)}"]
    if ds is None:
        return lines
    n_within = sum(len(g) - 1 for g in intake.duplicates_within)
    n_across = len(intake.duplicates_across)
    if n_within or n_across:
        lines.append(f"duplicates: {len(intake.duplicates_within)} groups within a class "
                     f"({n_within} extra copies), {n_across} groups across classes")
    else:
        lines.append("duplicates: none")
    if ds.skipped:
        lines.append(f"skipped: {len(ds.skipped)} unreadable files")
    k = max_folds(ds.labels)
    counts = ds.class_counts
    small = ds.classes[int(np.argmin(np.where(counts > 0, counts, counts.max() + 1)))]
    if k >= 2:
        lines.append(f"most folds: {k} (the smallest class, {small!r}, has {k} images)")
    else:
        lines.append(f"most folds: none (class {small!r} has {k} image; every class needs "
                     "at least 2)")
    if not found.problems:  # the identity of the data a search would read
        lines.append(f"fingerprint: {fingerprint(ds)}")
    return lines


def findings(found: Survey) -> list[str]:
    """The notes, then the problems that stop a search (each with its fix)."""
    lines = ["", f"notes: {len(found.notes) or 'none'}"]
    lines += [f"  - {msg}" for msg in found.notes]
    lines.append(f"problems that stop a search: {len(found.problems) or 'none'}")
    lines += ["  - " + p.replace("\n", "\n    ") for p in found.problems]
    return lines


def summary(found: Survey) -> list[str]:
    """Everything inspect prints to stdout, in order."""
    return inventory(found) + description(found) + findings(found)


def run(args: argparse.Namespace) -> int:
    """Survey, print everything found, and exit 2 when a search could not run."""
    with warnings.catch_warnings():
        # recorded in the survey and printed below, not twice
        warnings.simplefilter("ignore", DataWarning)
        found = survey(args.data, skip_bad=args.skip_bad,
                       folds=args.folds if args.folds is not None else LEAST_FOLDS)
    print("\n".join(summary(found)))
    if found.problems:
        n = len(found.problems)
        print(f"error: {found.source}: {n} problem{'s' if n > 1 else ''} listed above "
              f"under 'problems that stop a search' {'stop' if n > 1 else 'stops'} a search "
              "on this data; fix them and inspect again", file=sys.stderr)
        return 2
    if args.folds is not None:
        print(f"{args.folds} folds: possible")
    return 0
