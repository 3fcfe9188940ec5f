"""Loading a ``.npz`` of arrays: ``x`` images, ``y`` labels, optional ``classes``.

``x`` is (n, h, w) or (n, h, w, c) with c 1 or 3, either uint8 (0..255) or
float in [0, 1] (scaled by 255 and rounded); ``y`` is (n,) integers
``0..K-1`` with every class present; ``classes`` (K,) names the classes
(default ``"0" .. "K-1"``). Files are read without pickle, and only these
three arrays, after their headers were checked against sane limits
(:mod:`.npz_headers`): a hostile file is refused before anything is allocated.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np

from tinyconv.errors import DataError

from .dataset import Dataset, Intake, WarningLog
from .npz_headers import check_declared
from .validate import check_classes, check_finite, check_labels, warn_duplicates


def _pixels(x: np.ndarray, where: str) -> np.ndarray:
    """Validated (n, h, w, c) uint8 from the stored ``x``."""
    if x.ndim == 3:
        x = x[..., None]
    if x.ndim != 4 or x.shape[3] not in (1, 3):
        raise DataError(f"{where}: x must have shape (n, h, w) or (n, h, w, c) with c 1 "
                        f"(grey) or 3 (RGB), got {x.shape}{_shape_hint(x.shape)}")
    if x.shape[0] == 0 or x.shape[1] == 0 or x.shape[2] == 0:
        raise DataError(f"{where}: x holds no pixels (shape {x.shape})")
    if x.dtype == np.uint8:
        return np.ascontiguousarray(x)
    if x.dtype.kind == "f":
        check_finite(x, where + ": x")
        lo, hi = float(x.min()), float(x.max())
        if lo < 0.0 or hi > 1.0:
            hint = ("; they look like 0..255: store them as uint8 (x.astype(np.uint8))"
                    if hi <= 255.0 and lo >= 0.0 else "")
            raise DataError(f"{where}: float pixels must lie in [0, 1], but range from "
                            f"{lo:g} to {hi:g}{hint}")
        return np.rint(x * 255.0).astype(np.uint8)
    if x.dtype.kind in "iu":
        lo, hi = int(x.min()), int(x.max())
        if lo < 0 or hi > 255:
            raise DataError(f"{where}: integer pixels must lie in 0..255, but range from "
                            f"{lo} to {hi}; scale them to 0..255 and store uint8")
        return x.astype(np.uint8)
    raise DataError(f"{where}: x has dtype {x.dtype}; store uint8 (0..255) or float "
                    "in [0, 1]")


def _shape_hint(shape: tuple[int, ...]) -> str:
    """How to fix an image array of the wrong shape, for the shapes where one fix is clear."""
    if len(shape) == 4 and shape[3] == 4:
        return "; drop the alpha channel with x[..., :3]"
    if len(shape) == 4 and shape[1] in (1, 3, 4) and shape[3] > 4:
        return ("; it looks channels-first (n, c, h, w): move the channels last with "
                "np.moveaxis(x, 1, -1)" + (" and drop the alpha channel with x[..., :3]"
                                            if shape[1] == 4 else ""))
    if len(shape) == 2:
        return ("; each image is a flat row: give them their height and width, e.g. "
                "x.reshape(n, h, w)")
    return ""


def load_arrays(path: str | Path) -> tuple[Dataset, Intake]:
    """Read a ``.npz`` of images and labels into a :class:`Dataset`.

    Raises
    ------
    DataError
        Missing arrays, wrong shapes or dtypes, NaN/inf, pixels out of range,
        non-integer or non-contiguous labels, a single class, bad class names.
    """
    where = str(path)
    if not zipfile.is_zipfile(path):
        raise DataError(f"{where}: not a readable .npz file (not a zip archive); save it "
                        "with np.savez(path, x=images, y=labels)")
    try:
        with zipfile.ZipFile(path) as archive:
            check_declared(archive, where)  # before anything is allocated
        with np.load(path, allow_pickle=False) as z:
            stored = {k: z[k] for k in ("x", "y", "classes") if k in z.files}
    except (zipfile.BadZipFile, OSError, EOFError) as exc:
        raise DataError(f"{where}: not a readable .npz file ({exc}); save it with "
                        "np.savez(path, x=images, y=labels)") from None
    except ValueError as exc:
        raise DataError(f"{where}: holds object arrays, which are not read (no pickle): "
                        f"{exc}; store numeric x and y and string classes") from None
    missing = [k for k in ("x", "y") if k not in stored]
    if missing:
        raise DataError(f"{where}: missing array {' and '.join(repr(m) for m in missing)} "
                        f"(found {', '.join(repr(k) for k in stored) or 'none'}); save it "
                        "with np.savez(path, x=images, y=labels)")
    x, y = stored["x"], stored["y"]
    if y.ndim != 1 or x.ndim < 1 or x.shape[0] != y.shape[0]:
        raise DataError(f"{where}: x has {x.shape[0] if x.ndim else 0} images but y has "
                        f"shape {y.shape}; give one label per image, y of shape (n,)")
    images = _pixels(x, where)
    labels = check_labels(y, where + ": y")
    k = int(labels.max()) + 1
    if "classes" in stored:
        cls = stored["classes"]
        if cls.ndim != 1 or cls.dtype.kind not in "US" or cls.shape[0] != k:
            raise DataError(f"{where}: classes must be {k} strings (one per label "
                            f"0..{k - 1}), got {cls.dtype} of shape {cls.shape}")
        classes = tuple(str(c.decode() if isinstance(c, bytes) else c) for c in cls)
        if len(set(classes)) != k:
            raise DataError(f"{where}: class names repeat ({', '.join(classes)}); give "
                            "each class its own name")
    else:
        classes = tuple(str(i) for i in range(k))
    check_classes(classes, np.bincount(labels), where)
    log = WarningLog()
    within, across = warn_duplicates(images, labels, classes, None, log)
    h, w, c = images.shape[1:]
    kind = ("grey" if c == 1 else "RGB") + f" {x.dtype}"
    intake = Intake(((f"{h}x{w}", images.shape[0]),), ((kind, images.shape[0]),),
                    tuple(within), tuple(across))
    return Dataset(images, labels, classes, None, where, (), tuple(log.messages)), intake
