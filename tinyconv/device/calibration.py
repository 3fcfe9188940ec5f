"""The images an exported network is quantised and measured with, kept beside it.

``tinyconv export`` saves its calibration images (uint8, in the network's own
size and colour mode) as ``calibration.npz`` with the images held out of the
calibration sample, so the int8 network can be rebuilt exactly later
(``tinyconv emulate --network``) and measured on images it was not calibrated on.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from tinyconv.errors import DataError

CALIBRATION_FILE = "calibration.npz"


def save_calibration(folder: Path, calib: np.ndarray, held_out: np.ndarray) -> Path:
    """Write ``calibration.npz`` (``calib`` and ``held_out`` uint8 image arrays)."""
    from tinyconv.files import write_whole
    return write_whole(Path(folder) / CALIBRATION_FILE, lambda handle: np.savez_compressed(
        handle, calib=np.asarray(calib, np.uint8), held_out=np.asarray(held_out, np.uint8)),
        then="export again")


def load_calibration(folder: Path, shape: tuple[int, int, int],
                     n_images: int) -> tuple[np.ndarray, np.ndarray]:
    """(calibration images, up to ``n_images`` measurement images) saved by an export.

    The measurement images are those held out of calibration, or calibration
    images when none were held out.
    """
    path = Path(folder) / CALIBRATION_FILE
    if not path.exists():
        raise DataError(f"{path} not found: the int8 form of an exported network is rebuilt "
                        "from the calibration images its export saved; export again with "
                        "this version, or give the data with --data")
    try:
        with np.load(path, allow_pickle=False) as f:
            calib, held = f["calib"], f["held_out"]
    except (OSError, KeyError, ValueError) as exc:
        raise DataError(f"{path} is not a calibration file of tinyconv ({exc}); export "
                        "again or give --data") from None
    for name, arr in (("calib", calib), ("held_out", held)):
        if arr.dtype != np.uint8 or (arr.size and arr.shape[1:] != tuple(shape)):
            raise DataError(f"{path}: array {name!r} is {arr.dtype} {arr.shape}, not uint8 "
                            f"images of {shape}; export again")
    pool = held if len(held) else calib
    return calib, pool[:n_images]


def images_from_data(spec: str, input_spec, n_images: int,
                     seed: int) -> tuple[np.ndarray, np.ndarray]:
    """(calibration images, measurement images) from a data set, in the network's input.

    Up to 256 calibration images drawn with ``seed``; the measurement images
    are drawn from the rest (from all when nothing is left).
    """
    from tinyconv.data import load_data, prepare
    from tinyconv.quant import as_pixels

    data = load_data(spec)
    pixels = as_pixels(prepare(data.images, input_spec))
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(pixels))
    calib = np.sort(order[:256])
    rest = np.sort(order[256:]) if len(order) > 256 else np.sort(order)
    return pixels[calib], pixels[rest[:n_images]]
