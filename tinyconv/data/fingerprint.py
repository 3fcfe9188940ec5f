"""A fingerprint of a data set, so a run refuses to resume on other data.

SHA-256 over the image shape, the pixels, the labels and the class names (in
order); paths, source and warnings do not count, so the same images loaded
from a moved folder have the same fingerprint.
"""

from __future__ import annotations

import hashlib

import numpy as np

from .dataset import Dataset

_VERSION = b"tinyconv-data-1"


def fingerprint(dataset: Dataset) -> str:
    """Hex SHA-256 digest of ``dataset``'s pixels, labels and class names."""
    h = hashlib.sha256(_VERSION)
    h.update(repr(tuple(dataset.images.shape)).encode())
    h.update(np.ascontiguousarray(dataset.images).tobytes())
    h.update(np.ascontiguousarray(dataset.labels, dtype="<i8").tobytes())
    h.update("\x00".join(dataset.classes).encode("utf-8"))
    return h.hexdigest()
