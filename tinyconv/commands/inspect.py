"""``tinyconv inspect DATA``: what is in a data set before searching on it.

Prints the classes with their image counts, the image sizes and colour kinds
seen, duplicate images, every problem found (warnings and notes recorded while
loading, skipped files) and the most stratified folds the data allows. With
``--folds K`` it also checks that K folds work and fails (exit 2, naming the
small class) when they do not. Exit 0 otherwise; unusable data is exit 2.
"""

from __future__ import annotations

import argparse
import warnings

import numpy as np

from tinyconv.data import fingerprint, load_with_intake
from tinyconv.data.dataset import DataWarning
from tinyconv.data.validate import check_folds, max_folds


def configure(parser: argparse.ArgumentParser) -> None:
    """Add this command's arguments."""
    parser.add_argument("data", metavar="DATA",
                        help="a folder with one sub-folder per class, a .npz file (x, y), "
                             "builtin:tiles[?n=100&size=32&seed=0] or builtin:digits")
    parser.add_argument("--skip-bad", action="store_true",
                        help="skip unreadable images (they are counted) instead of stopping")
    parser.add_argument("--folds", type=int, default=None, metavar="K",
                        help="also check that K stratified folds are possible")


def _counts(pairs: tuple[tuple[str, int], ...]) -> str:
    return ", ".join(f"{name} ({count})" for name, count in pairs) or "none"


def summary(ds, intake) -> list[str]:
    """The report lines for a loaded data set and what its loader saw."""
    h, w, c = ds.image_shape
    counts = ds.class_counts
    width = max(len(name) for name in ds.classes)
    lines = [f"data: {ds.source}",
             f"images: {ds.n} in {ds.n_classes} classes, stored as {h}x{w} "
             f"{'grey' if c == 1 else 'RGB'} (uint8)",
             "", f"{'class'.ljust(width)}  images"]
    lines += [f"{name.ljust(width)}  {int(n):6d}" for name, n in zip(ds.classes, counts)]
    lines += ["", f"sizes seen: {_counts(intake.sizes)}",
              f"colour kinds: {_counts(intake.kinds)}"]
    n_within = sum(len(g) - 1 for g in intake.duplicates_within)
    n_across = len(intake.duplicates_across)
    if n_within or n_across:
        lines.append(f"duplicates: {len(intake.duplicates_within)} groups within a class "
                     f"({n_within} extra copies), {n_across} groups across classes")
    else:
        lines.append("duplicates: none")
    lines.append(f"skipped: {len(ds.skipped)} unreadable files")
    lines.append(f"problems: {len(ds.warnings) or 'none'}")
    lines += [f"  - {msg}" for msg in ds.warnings]
    k = max_folds(ds.labels)
    small = ds.classes[int(np.argmin(counts))]
    if k >= 2:
        lines.append(f"most folds: {k} (the smallest class, {small!r}, has {k} images)")
    else:
        lines.append(f"most folds: none (class {small!r} has {k} image; every class needs "
                     "at least 2)")
    lines.append(f"fingerprint: {fingerprint(ds)}")
    return lines


def run(args: argparse.Namespace) -> int:
    """Load, summarise, and optionally check the number of folds."""
    with warnings.catch_warnings():
        # recorded in the data set and printed below, not twice
        warnings.simplefilter("ignore", DataWarning)
        ds, intake = load_with_intake(args.data, skip_bad=args.skip_bad)
    print("\n".join(summary(ds, intake)))
    if args.folds is not None:
        check_folds(ds.labels, args.folds, ds.classes)
        print(f"{args.folds} folds: possible")
    return 0
