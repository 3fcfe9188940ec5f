"""Loading an image folder: one sub-folder per class.

``root/<class>/<image>``: the class names are the sub-folder names in sorted
order. PNG, JPEG, BMP and GIF files are read (see :mod:`.images`); hidden
entries (names starting with ``.``) and files of other types are ignored with
a note; sub-folders inside a class folder are ignored with a note.

Problems are reported all at once (:func:`survey_folder`): every unreadable
file (or, with ``skip_bad=True``, skipped and counted), every empty class
folder, too few classes and, when the folds are known, classes too small for
them, in one error. What Pillow warns of while reading (its suspicion of a
decompression bomb included) becomes a note. Images with a side over :data:`MAX_SIDE` pixels are shrunk by a whole
factor as they are read (block means), so folders of camera photos stay small
in memory. Images of different sizes are resized to the most common size (area
averaging or bilinear, :mod:`.resize`), with a warning when sizes lie far
apart. When every image is grey the data set keeps one channel; otherwise
grey images are repeated to RGB.
"""

from __future__ import annotations

import warnings
from collections import Counter
from pathlib import Path

import numpy as np
from PIL import Image

from tinyconv.errors import DataError

from .dataset import Dataset, Intake, WarningLog
from .images import EXTENSIONS, UnreadableImage, read_image, reduce_by
from .resize import resize_uint8
from .survey import Survey, fold_problems, refusal
from .validate import check_classes, listing, warn_duplicates

FAR_APART = 2.0  # a side more than this factor from the common size draws a warning
MAX_SIDE = 256   # larger images are shrunk by a whole factor while reading (memory)


def _scan(root: Path, log: WarningLog) -> dict[str, list[Path]]:
    """Class name -> image files, noting what is ignored."""
    hidden: list[str] = []
    other: list[str] = []
    nested: list[str] = []
    loose: list[str] = []
    classes: dict[str, list[Path]] = {}
    for entry in sorted(root.iterdir()):
        if entry.name.startswith("."):
            hidden.append(entry.name)
        elif entry.is_dir():
            files: list[Path] = []
            for f in sorted(entry.iterdir()):
                rel = f"{entry.name}/{f.name}"
                if f.name.startswith("."):
                    hidden.append(rel)
                elif f.is_dir():
                    nested.append(rel + "/")
                elif f.suffix.lower() in EXTENSIONS:
                    files.append(f)
                else:
                    other.append(rel)
            classes[entry.name] = files
        else:
            loose.append(entry.name)
    if not classes:
        found = (f"{len(loose)} files but no sub-folders" if loose else "nothing")
        raise DataError(f"{root}: found {found}; an image folder needs one sub-folder per "
                        "class, e.g. root/ring/img1.png and root/cross/img2.png")
    if hidden:
        log.note(f"ignored {len(hidden)} hidden "
                 f"{'entry' if len(hidden) == 1 else 'entries'}: {listing(hidden)}")
    if other:
        log.note(f"ignored {len(other)} non-image "
                 f"{'file' if len(other) == 1 else 'files'} (not "
                 f"{'/'.join(e[1:].upper() for e in EXTENSIONS)}): {listing(other)}")
    if nested:
        log.note(f"ignored {len(nested)} folders inside class folders (only files "
                 f"directly in a class folder are read): {listing(nested)}")
    if loose:
        log.note(f"ignored {len(loose)} files directly in {root} (images belong in a "
                 f"class sub-folder): {listing(loose)}")
    return classes


def load_folder(root: str | Path, *, skip_bad: bool = False) -> tuple[Dataset, Intake]:
    """Read an image folder into a :class:`Dataset`.

    Parameters
    ----------
    root : str or Path
        Folder with one sub-folder per class.
    skip_bad : bool
        Skip unreadable images (listed in ``Dataset.skipped`` and warned
        about) instead of refusing the folder.

    Returns
    -------
    Dataset, Intake

    Raises
    ------
    DataError
        Listing every problem at once (:func:`survey_folder`): unreadable
        images (unless ``skip_bad``), empty class folders, fewer than two
        classes, no sub-folders.
    """
    found = survey_folder(root, skip_bad=skip_bad)
    if found.problems:
        raise refusal(found)
    assert found.dataset is not None
    return found.dataset, found.intake


def _read(f: Path, pillow: list[str], huge: list[str]) -> tuple[np.ndarray, str]:
    """One image; what Pillow warns of is kept as notes, not shown as Python warnings."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            return read_image(f)
        finally:
            for w in caught:
                where = f"{f.parent.name}/{f.name}"
                if issubclass(w.category, Image.DecompressionBombWarning):
                    huge.append(where)
                else:
                    pillow.append(f"{where} ({str(w.message).strip().splitlines()[0]})")


def survey_folder(root: str | Path, *, skip_bad: bool = False,
                  folds: int | None = None) -> Survey:
    """Read an image folder and find every problem in one pass (see :mod:`.survey`).

    Parameters
    ----------
    root : str or Path
        Folder with one sub-folder per class.
    skip_bad : bool
        Unreadable images are left out and noted instead of being a problem.
    folds : int, optional
        Also a problem: classes with fewer usable images than this many folds.

    Raises
    ------
    DataError
        Only when there is nothing to survey: no sub-folders at all.
    """
    root = Path(root)
    log = WarningLog()
    scanned = _scan(root, log)
    pixels: list[np.ndarray] = []
    labels: list[int] = []
    paths: list[str] = []
    kinds: Counter[str] = Counter()
    bad: list[tuple[str, str]] = []          # (path, reason)
    large: list[str] = []
    pillow: list[str] = []
    huge: list[str] = []
    seen: Counter[str] = Counter()
    names = list(scanned)
    for c, name in enumerate(names):
        for f in scanned[name]:
            try:
                im, kind = _read(f, pillow, huge)
            except UnreadableImage as exc:
                bad.append((str(f), str(exc)))
                continue
            seen[f"{im.shape[0]}x{im.shape[1]}"] += 1
            if max(im.shape[:2]) > MAX_SIDE:
                large.append(f"{f.parent.name}/{f.name} ({im.shape[0]}x{im.shape[1]})")
                im = reduce_by(im, -(-max(im.shape[:2]) // MAX_SIDE))
            pixels.append(im)
            labels.append(c)
            paths.append(str(f))
            kinds[kind] += 1
    problems: list[str] = []
    skipped: tuple[str, ...] = ()
    if bad:
        what = f"{len(bad)} unreadable image {'file' if len(bad) == 1 else 'files'}"
        if skip_bad:
            skipped = tuple(path for path, _ in bad)
            log.warn(f"skipped {what}: {listing([f'{p} ({why})' for p, why in bad])}")
        else:
            every = "".join(f"\n    {path} ({why})" for path, why in bad)
            problems.append(f"{what}; fix or remove them, or pass skip_bad (--skip-bad) to "
                            f"leave them out:{every}")
    if huge:
        log.note(f"{len(huge)} {'image holds' if len(huge) == 1 else 'images hold'} more "
                 f"pixels than Pillow's safety limit "
                 f"({Image.MAX_IMAGE_PIXELS:,} pixels), above which it suspects a file made to "
                 f"exhaust memory: {listing(huge)}; they were read and shrunk; if such large "
                 "images are unexpected, check where they came from")
    if pillow:
        log.note(f"Pillow remarked on {len(pillow)} files while reading them: "
                 f"{listing(pillow, 4)}")
    if large:
        log.note(f"{len(large)} images larger than {MAX_SIDE} pixels were shrunk by whole "
                 f"factors while reading (block means) to save memory: {listing(large)}")
    counts = np.bincount(np.array(labels, dtype=np.int64), minlength=len(names))
    empty = [names[i] for i in range(len(names)) if counts[i] == 0]
    if empty:
        problems.append(f"{len(empty)} class "
                        f"{'folder has' if len(empty) == 1 else 'folders have'} no readable "
                        f"images: {listing([repr(e) for e in empty])}; add PNG, JPEG, BMP or "
                        "GIF images to it, or remove the folder")
    try:
        check_classes(names, counts, str(root))
    except DataError as exc:
        problems.append(str(exc).removeprefix(f"{root}: "))
    label_arr = np.array(labels, dtype=np.int64)
    problems += fold_problems(label_arr, folds, names)
    ds, intake = None, Intake(tuple(seen.most_common()), tuple(kinds.most_common()))
    if pixels:
        images = _stack(pixels, paths, log)
        within, across = warn_duplicates(images, label_arr, names, paths, log)
        ds = Dataset(images, label_arr, tuple(names), tuple(paths), str(root), skipped,
                     tuple(log.messages))
        intake = Intake(intake.sizes, intake.kinds, tuple(within), tuple(across))
    return Survey(str(root), tuple(names), tuple(int(n) for n in counts), tuple(bad), ds,
                  intake, tuple(log.messages), tuple(problems))


def _stack(pixels: list[np.ndarray], paths: list[str], log: WarningLog) -> np.ndarray:
    """One (n, h, w, c) uint8 array at the most common size."""
    shapes = [p.shape[:2] for p in pixels]
    (h, w), _ = Counter(shapes).most_common(1)[0]
    grey = all(p.shape[2] == 1 or (np.array_equal(p[..., 0], p[..., 1])
                                   and np.array_equal(p[..., 0], p[..., 2])) for p in pixels)
    c = 1 if grey else 3
    out = np.empty((len(pixels), h, w, c), dtype=np.uint8)
    far: list[str] = []
    n_resized = 0
    for i, p in enumerate(pixels):
        p = p[..., :1] if grey else (np.repeat(p, 3, axis=2) if p.shape[2] == 1 else p)
        ph, pw = p.shape[:2]
        if (ph, pw) != (h, w):
            n_resized += 1
            if max(ph / h, h / ph, pw / w, w / pw) > FAR_APART:
                far.append(f"{paths[i]} ({ph}x{pw})")
            p = resize_uint8(p[None], h, w)[0]
        out[i] = p
    if far:
        log.warn(f"image sizes lie far apart: {len(far)} of {len(pixels)} images differ "
                 f"from the most common size {h}x{w} by more than {FAR_APART:g}x: "
                 f"{listing(far)}; they are resized to {h}x{w} (and again to the "
                 "network's input size), which distorts them; crop or resize them "
                 "consistently before loading")
    elif n_resized:
        log.note(f"{n_resized} images resized to the most common size {h}x{w}")
    return out
