"""The validated data set every loader returns, and the project's data warnings.

A :class:`Dataset` is what the rest of tinyconv reads: uint8 images in NHWC,
integer labels ``0..K-1`` and the class names. Loaders validate once, here at
the boundary; everything downstream trusts it.

Warnings about a data set are issued with :mod:`warnings` under
:class:`DataWarning` (or its subclasses) *and* recorded in
``Dataset.warnings``, so a command can print them in its summary and a run can
store them.
"""

from __future__ import annotations

import os
import sys
import warnings
from dataclasses import dataclass, field

import numpy as np

_HERE = os.path.dirname(os.path.abspath(__file__)) + os.sep


class DataWarning(UserWarning):
    """A data set that can be used, but not as well as it could be."""


class DataNote(DataWarning):
    """Something ignored on purpose (hidden or non-image files): for the record."""


class LeakageWarning(DataWarning):
    """A problem that makes cross-validated accuracy look better than it is.

    Raised for identical images filed under different classes: the copies can
    land in the training and the held-out part of one fold.
    """


@dataclass(frozen=True, eq=False)
class Dataset:
    """Images with labels, validated.

    Attributes
    ----------
    images : ndarray, shape (n, h, w, c), uint8
        c is 1 (grey) or 3 (RGB). Read-only.
    labels : ndarray, shape (n,), int64
        Values in ``0..K-1``, every value present. Read-only.
    classes : tuple of str, length K
        Class names; ``classes[labels[i]]`` is image i's class.
    paths : tuple of str or None
        Source file of each image, when the images came from files.
    source : str
        What was loaded (a path or a ``builtin:`` spec with its options).
    skipped : tuple of str
        Files left out because they could not be read (``skip_bad=True``).
    warnings : tuple of str
        Every warning and note issued while loading, in order.
    """

    images: np.ndarray
    labels: np.ndarray
    classes: tuple[str, ...]
    paths: tuple[str, ...] | None = None
    source: str = ""
    skipped: tuple[str, ...] = ()
    warnings: tuple[str, ...] = field(default=())

    def __post_init__(self) -> None:
        images, labels = self.images, self.labels
        if not (isinstance(images, np.ndarray) and images.dtype == np.uint8
                and images.ndim == 4 and images.shape[3] in (1, 3)):
            raise TypeError("Dataset.images must be a uint8 array of shape (n, h, w, 1|3), "
                            f"got {getattr(images, 'dtype', type(images))} "
                            f"{getattr(images, 'shape', '')}")
        if not (isinstance(labels, np.ndarray) and labels.dtype == np.int64
                and labels.shape == (images.shape[0],)):
            raise TypeError(f"Dataset.labels must be int64 of shape ({images.shape[0]},), got "
                            f"{getattr(labels, 'dtype', type(labels))} "
                            f"{getattr(labels, 'shape', '')}")
        if self.paths is not None and len(self.paths) != images.shape[0]:
            raise ValueError(f"Dataset.paths has {len(self.paths)} entries for "
                             f"{images.shape[0]} images")
        if labels.size and (labels.min() < 0 or labels.max() >= len(self.classes)):
            raise ValueError(f"Dataset.labels must lie in 0..{len(self.classes) - 1}")
        images.setflags(write=False)
        labels.setflags(write=False)

    @property
    def n(self) -> int:
        """Number of images."""
        return int(self.images.shape[0])

    @property
    def n_classes(self) -> int:
        """Number of classes K."""
        return len(self.classes)

    @property
    def image_shape(self) -> tuple[int, int, int]:
        """Per-image shape (h, w, c)."""
        return tuple(self.images.shape[1:])  # type: ignore[return-value]

    @property
    def class_counts(self) -> np.ndarray:
        """Images per class, shape (K,), int64."""
        return np.bincount(self.labels, minlength=self.n_classes).astype(np.int64)

    def __repr__(self) -> str:
        h, w, c = self.image_shape
        return (f"Dataset(source={self.source!r}, n={self.n}, size={h}x{w}x{c}, "
                f"classes={self.n_classes}, skipped={len(self.skipped)}, "
                f"warnings={len(self.warnings)})")


@dataclass(frozen=True)
class Intake:
    """What a loader saw on the way in, for ``tinyconv inspect``.

    Attributes
    ----------
    sizes : tuple of (str, int)
        Image sizes seen as ``"{h}x{w}"`` with their counts, most common first.
    kinds : tuple of (str, int)
        Colour kinds seen (e.g. ``"RGB"``, ``"palette+alpha"``, ``"grey 16-bit"``)
        with their counts, most common first.
    duplicates_within : tuple of tuple of int
        Groups of identical images (indices into the data set) in one class.
    duplicates_across : tuple of tuple of int
        Groups of identical images filed under more than one class.
    """

    sizes: tuple[tuple[str, int], ...] = ()
    kinds: tuple[tuple[str, int], ...] = ()
    duplicates_within: tuple[tuple[int, ...], ...] = ()
    duplicates_across: tuple[tuple[int, ...], ...] = ()


def _outside_level() -> int:
    """``stacklevel`` for :func:`warnings.warn` that points past this package's frames."""
    frame = sys._getframe(2)          # the caller of WarningLog.warn
    level = 2
    while frame is not None and frame.f_code.co_filename.startswith(_HERE):
        frame = frame.f_back
        level += 1
    return level


class WarningLog:
    """Collects warnings while loading, issues each, and hands them to the Dataset."""

    def __init__(self) -> None:
        self.messages: list[str] = []

    def warn(self, message: str, category: type[DataWarning] = DataWarning) -> None:
        """Issue ``message`` as a warning of ``category`` and record it.

        The warning is attributed to the first caller outside this package
        (the line that asked for the data), not to the loader's internals.
        """
        self.messages.append(message)
        warnings.warn(message, category, stacklevel=_outside_level())

    def note(self, message: str) -> None:
        """Record something ignored on purpose (a :class:`DataNote`)."""
        self.warn("note: " + message, DataNote)
