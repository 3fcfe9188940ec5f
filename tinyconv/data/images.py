"""Reading one image file with Pillow into uint8 pixels.

Every file becomes grey (h, w, 1) or RGB (h, w, 3) uint8:

* EXIF orientation is applied, so pixels are as a viewer shows them;
* an animated GIF gives its first frame;
* palette images are expanded; transparency (alpha, or a palette's
  transparent entry) is composited over white;
* 16-bit and 32-bit grey are scaled to 8 bits (``round(v / 257)`` for 16 bit);
* CMYK, YCbCr and other colour modes are converted to RGB by Pillow.

The *kind* returned with the pixels (``"RGB"``, ``"grey 16-bit"``,
``"palette+alpha"``, ``"CMYK"`` ...) is what the file held, for reports.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from PIL import Image, ImageOps, UnidentifiedImageError

EXTENSIONS = (".png", ".jpg", ".jpeg", ".bmp", ".gif")

_GREY_MODES = {"1", "L", "LA", "La", "I", "I;16", "I;16L", "I;16B", "I;16N", "F"}
_KIND = {"1": "bilevel", "L": "grey", "LA": "grey+alpha", "La": "grey+alpha",
         "I;16": "grey 16-bit", "I;16L": "grey 16-bit", "I;16B": "grey 16-bit",
         "I;16N": "grey 16-bit", "I": "grey 32-bit", "F": "grey float",
         "P": "palette", "PA": "palette+alpha", "RGB": "RGB", "RGBA": "RGB+alpha",
         "RGBa": "RGB+alpha", "RGBX": "RGB", "CMYK": "CMYK", "YCbCr": "YCbCr",
         "LAB": "LAB", "HSV": "HSV"}


class UnreadableImage(Exception):
    """A file that Pillow cannot decode; the message says why."""


def _reason(exc: BaseException) -> str:
    text = str(exc).strip() or type(exc).__name__
    return text.splitlines()[0]


def kind_of(im: Image.Image) -> str:
    """A short description of an opened image's colour kind."""
    kind = _KIND.get(im.mode, im.mode)
    if im.mode == "P" and "transparency" in im.info:
        kind = "palette+alpha"
    elif im.mode in ("L", "RGB") and "transparency" in im.info:
        kind += "+alpha"
    return kind


def _grey_pixels(im: Image.Image) -> np.ndarray:
    """Grey image (any depth) to uint8 (h, w)."""
    if im.mode in ("1", "L"):
        return np.asarray(im.convert("L"), dtype=np.uint8)
    a = np.asarray(im)
    if im.mode.startswith("I;16"):
        a = a.astype(np.float64) / 257.0            # 65535 -> 255
    elif im.mode == "I":
        a = a.astype(np.float64)
        if a.max(initial=0) > 255:                   # 16-bit data held as 32-bit ints
            a = a / 257.0
    elif im.mode == "F":
        a = a.astype(np.float64)
        if a.max(initial=0) <= 1.0:
            a = a * 255.0
    return np.clip(np.rint(a), 0, 255).astype(np.uint8)


def _over_white(rgba: np.ndarray) -> np.ndarray:
    """Composite (h, w, c+1) uint8 with alpha last over white -> (h, w, c)."""
    colour = rgba[..., :-1].astype(np.float64)
    alpha = rgba[..., -1:].astype(np.float64) / 255.0
    out = colour * alpha + 255.0 * (1.0 - alpha)
    return np.clip(np.rint(out), 0, 255).astype(np.uint8)


def reduce_by(pixels: np.ndarray, factor: int) -> np.ndarray:
    """Shrink (h, w, c) uint8 by a whole factor: the mean of each factor x factor block.

    Rows and columns past the last whole block are dropped (at most factor - 1).
    """
    h, w, c = pixels.shape
    hb, wb = h // factor, w // factor
    blocks = pixels[: hb * factor, : wb * factor].reshape(hb, factor, wb, factor, c)
    return np.rint(blocks.mean(axis=(1, 3))).astype(np.uint8)


def read_image(path: str | Path) -> tuple[np.ndarray, str]:
    """Pixels and colour kind of one image file.

    Returns
    -------
    pixels : ndarray, shape (h, w, 1) or (h, w, 3), uint8
    kind : str

    Raises
    ------
    UnreadableImage
        Empty, truncated, corrupt or not an image; the message says why.
    """
    path = Path(path)
    try:
        if path.stat().st_size == 0:
            raise UnreadableImage("the file is empty (0 bytes)")
        with Image.open(path) as im:
            im.seek(0)                               # first frame of an animation
            kind = kind_of(im)
            im.load()                                # decode now: truncation shows here
            im = ImageOps.exif_transpose(im)
            mode = im.mode
            if mode in _GREY_MODES and mode not in ("LA", "La"):
                if "transparency" in im.info and mode == "L":
                    pixels = _over_white(np.asarray(im.convert("LA")))
                else:
                    pixels = _grey_pixels(im)[..., None]
            elif mode in ("LA", "La"):
                pixels = _over_white(np.asarray(im.convert("LA")))
            elif mode in ("P", "PA", "RGBA", "RGBa") or "transparency" in im.info:
                pixels = _over_white(np.asarray(im.convert("RGBA")))
            else:
                pixels = np.asarray(im.convert("RGB"), dtype=np.uint8)
    except UnreadableImage:
        raise
    except UnidentifiedImageError:
        raise UnreadableImage("not a recognised image (corrupt, or not the format its "
                              "name says)") from None
    except (OSError, ValueError, SyntaxError, EOFError, IndexError, KeyError,
            Image.DecompressionBombError) as exc:
        raise UnreadableImage("cannot be decoded, truncated or corrupt: "
                              + _reason(exc)) from None
    if pixels.ndim == 2:
        pixels = pixels[..., None]
    return np.ascontiguousarray(pixels), kind
