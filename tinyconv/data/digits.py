"""scikit-learn's bundled handwritten digits as a second real data set.

1,797 grey images of 8x8 pixels with values 0..16 and 10 classes (as the
scikit-learn documentation describes ``load_digits``), scaled here to
uint8 0..255 by ``round(v * 255 / 16)``. The data ships inside scikit-learn,
so nothing is downloaded; scikit-learn itself is needed only for this loader.
"""

from __future__ import annotations

import numpy as np

from tinyconv.errors import DataError

from .dataset import Dataset, Intake, WarningLog
from .validate import warn_duplicates

SPEC = "builtin:digits"


def load_digits() -> tuple[Dataset, Intake]:
    """The digits as a :class:`Dataset` of shape (1797, 8, 8, 1).

    Raises
    ------
    DataError
        When scikit-learn is not installed (with the command to install it).
    """
    try:
        from sklearn.datasets import load_digits as _sk_digits
    except ImportError:
        raise DataError(f"{SPEC} needs scikit-learn, which ships the digits images, but it "
                        "is not installed; install it with: pip install scikit-learn") from None
    bunch = _sk_digits()
    images = np.rint(np.asarray(bunch.images, dtype=np.float64) * (255.0 / 16.0))
    images = np.clip(images, 0, 255).astype(np.uint8)[..., None]
    labels = np.asarray(bunch.target, dtype=np.int64)
    classes = tuple(str(c) for c in bunch.target_names)
    log = WarningLog()
    within, across = warn_duplicates(images, labels, classes, None, log)
    intake = Intake((("8x8", images.shape[0]),), (("grey 0..16", images.shape[0]),),
                    tuple(within), tuple(across))
    return Dataset(images, labels, classes, None, SPEC, (), tuple(log.messages)), intake
