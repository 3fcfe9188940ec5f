"""Augmentation: random changes to each training mini-batch that keep its labels true.

The training loop (:func:`tinyconv.train.fit`) applies an :class:`Augment` to
every mini-batch of prepared, normalised images, never to held-out images.
Every random draw comes from a ``numpy.random.Generator`` the caller seeds, so
one seed gives the same batches bit for bit on any worker.

The text form (ours): ``none``, or transforms joined by ``+``::

    turn        a quarter turn: 0, 90, 180 or 270 degrees, each a quarter of
                the images (square images only)
    mirror      left-right mirror of half the images
    upend       top-bottom flip of half the images
    shift{p}    translation by up to p pixels each way: pad p pixels of 0,
                crop back at a random offset (p = 1..16)
    contrast{q} deviations from the image's own per-channel mean scaled by a
                factor in [1 - q/100, 1 + q/100] (q = 1..99)
    bright{q}   every pixel of an image moved by one offset in
                [-q/100, q/100] (q = 1..400)
    cutout{s}   one s x s square set to 0, centred on a random pixel (clipped
                at the border; s = 1..64)

e.g. ``shift2+mirror+upend+turn``. The order written does not matter: the
transforms run in the order of the table above (geometry, then light, then
cutout), and :func:`parse_augment` gives each combination one canonical text.
The images the engine trains on are normalised per channel (mean 0 and
standard deviation 1 over the training images), so 0 is the training images'
mean colour and ``bright20`` moves an image by up to 0.2 standard deviations.

Which transforms keep a label true depends on the images: a mark stamped in
any orientation keeps its name under every flip and turn, a digit does not (a
mirrored 2 is no 2, a turned 6 is a 9). Nothing is applied unless asked for.

Each transform draws its parameters for a batch (:meth:`draw`) and then
applies them (:meth:`apply`) in vectorised NumPy; the tests compare every
``apply`` with a plain loop over images and pixels.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from tinyconv.errors import InputError

NONE = "none"


class AugmentError(InputError):
    """An augmentation text that cannot be used; the message says what and how to fix it."""


@dataclass(frozen=True)
class Turn:
    """A random quarter turn (``np.rot90`` direction, k = 0..3) of square images."""

    word: ClassVar[str] = "turn"

    def __str__(self) -> str:
        return self.word

    def draw(self, rng: np.random.Generator, n: int, h: int, w: int) -> np.ndarray:
        """Quarter turns per image, shape (n,), int in 0..3."""
        return rng.integers(0, 4, size=n)

    def apply(self, x: np.ndarray, k: np.ndarray) -> np.ndarray:
        out = x.copy()
        for turns in (1, 2, 3):
            sel = k == turns
            if sel.any():
                out[sel] = np.rot90(x[sel], turns, axes=(1, 2))  # (m, h, w, c), h == w
        return out


@dataclass(frozen=True)
class Mirror:
    """Left-right mirror (reverse the width axis) of half the images, at random."""

    word: ClassVar[str] = "mirror"
    axis: ClassVar[int] = 2

    def __str__(self) -> str:
        return self.word

    def draw(self, rng: np.random.Generator, n: int, h: int, w: int) -> np.ndarray:
        """Which images flip, shape (n,), bool."""
        return rng.random(n) < 0.5

    def apply(self, x: np.ndarray, flip: np.ndarray) -> np.ndarray:
        return np.where(flip[:, None, None, None], np.flip(x, axis=self.axis), x)


@dataclass(frozen=True)
class Upend(Mirror):
    """Top-bottom flip (reverse the height axis) of half the images, at random."""

    word: ClassVar[str] = "upend"
    axis: ClassVar[int] = 1


@dataclass(frozen=True)
class Shift:
    """Translation by up to ``pixels`` each way: pad with 0, crop back at an offset."""

    pixels: int
    word: ClassVar[str] = "shift"
    limits: ClassVar[tuple[int, int]] = (1, 16)

    def __str__(self) -> str:
        return f"{self.word}{self.pixels}"

    def draw(self, rng: np.random.Generator, n: int, h: int, w: int) -> np.ndarray:
        """Moves (dy, dx) per image, shape (n, 2), int in -pixels..pixels: the pixel at
        (y, x) goes to (y + dy, x + dx)."""
        return rng.integers(-self.pixels, self.pixels + 1, size=(n, 2))

    def apply(self, x: np.ndarray, moves: np.ndarray) -> np.ndarray:
        n, h, w, _ = x.shape
        p = self.pixels
        padded = np.pad(x, ((0, 0), (p, p), (p, p), (0, 0)))        # (n, h+2p, w+2p, c)
        # output row y reads padded row p + y - dy (and likewise for columns)
        rows = (p - moves[:, 0])[:, None] + np.arange(h)              # (n, h)
        cols = (p - moves[:, 1])[:, None] + np.arange(w)              # (n, w)
        return padded[np.arange(n)[:, None, None], rows[:, :, None], cols[:, None, :]]


@dataclass(frozen=True)
class Contrast:
    """Scale each image's deviations from its own per-channel mean by ``1 +- percent/100``."""

    percent: int
    word: ClassVar[str] = "contrast"
    limits: ClassVar[tuple[int, int]] = (1, 99)

    def __str__(self) -> str:
        return f"{self.word}{self.percent}"

    def draw(self, rng: np.random.Generator, n: int, h: int, w: int) -> np.ndarray:
        """Factors per image, shape (n,), uniform in [1 - q, 1 + q] with q = percent / 100."""
        q = self.percent / 100.0
        return rng.uniform(1.0 - q, 1.0 + q, size=n)

    def apply(self, x: np.ndarray, factor: np.ndarray) -> np.ndarray:
        mean = x.mean(axis=(1, 2), keepdims=True)                     # (n, 1, 1, c)
        f = factor.astype(x.dtype)[:, None, None, None]
        return (mean + f * (x - mean)).astype(x.dtype, copy=False)


@dataclass(frozen=True)
class Bright:
    """Move every pixel of an image by one offset in ``+- percent/100``."""

    percent: int
    word: ClassVar[str] = "bright"
    limits: ClassVar[tuple[int, int]] = (1, 400)

    def __str__(self) -> str:
        return f"{self.word}{self.percent}"

    def draw(self, rng: np.random.Generator, n: int, h: int, w: int) -> np.ndarray:
        """Offsets per image, shape (n,), uniform in [-q, q] with q = percent / 100."""
        q = self.percent / 100.0
        return rng.uniform(-q, q, size=n)

    def apply(self, x: np.ndarray, offset: np.ndarray) -> np.ndarray:
        return x + offset.astype(x.dtype)[:, None, None, None]


@dataclass(frozen=True)
class Cutout:
    """Set one ``side x side`` square per image to 0, centred on a random pixel.

    The square covers rows ``cy - side // 2`` to ``cy - side // 2 + side - 1``
    (and likewise columns), clipped at the border, so near an edge less of
    the image is hidden (common practice).
    """

    side: int
    word: ClassVar[str] = "cutout"
    limits: ClassVar[tuple[int, int]] = (1, 64)

    def __str__(self) -> str:
        return f"{self.word}{self.side}"

    def draw(self, rng: np.random.Generator, n: int, h: int, w: int) -> np.ndarray:
        """Centres (cy, cx) per image, shape (n, 2), int: 0 <= cy < h, 0 <= cx < w."""
        return np.stack([rng.integers(0, h, size=n), rng.integers(0, w, size=n)], axis=1)

    def apply(self, x: np.ndarray, centres: np.ndarray) -> np.ndarray:
        _, h, w, _ = x.shape
        top = centres[:, 0] - self.side // 2                          # (n,)
        left = centres[:, 1] - self.side // 2
        ys, xs = np.arange(h), np.arange(w)
        in_rows = (ys >= top[:, None]) & (ys < top[:, None] + self.side)      # (n, h)
        in_cols = (xs >= left[:, None]) & (xs < left[:, None] + self.side)    # (n, w)
        hidden = in_rows[:, :, None] & in_cols[:, None, :]                     # (n, h, w)
        return np.where(hidden[..., None], np.zeros((), x.dtype), x)


Transform = Turn | Mirror | Upend | Shift | Contrast | Bright | Cutout
#: The transforms in the order they run (and are written in the canonical text).
ORDER: tuple[type, ...] = (Turn, Mirror, Upend, Shift, Contrast, Bright, Cutout)
_WORDS = {kind.word: kind for kind in ORDER}
_TOKEN = re.compile(r"([a-z]+)(\d*)")
FORMS = "turn, mirror, upend, shift{p}, contrast{q}, bright{q}, cutout{s}"


@dataclass(frozen=True)
class Augment:
    """A combination of transforms, in the order they run; empty for ``none``.

    ``Augment(...)(x, rng)`` returns an augmented copy of the batch ``x``
    (shape (n, h, w, c)); ``x`` is never changed.
    """

    steps: tuple[Transform, ...] = ()

    def __str__(self) -> str:
        return "+".join(map(str, self.steps)) if self.steps else NONE

    def __bool__(self) -> bool:
        return bool(self.steps)

    def check_shape(self, h: int, w: int) -> None:
        """Refuse quarter turns of images that are not square."""
        if h != w and any(isinstance(s, Turn) for s in self.steps):
            raise AugmentError(f"augment {str(self)!r}: turn needs square images, and these "
                               f"are {h}x{w}; take turn out, or use a square input size")

    def __call__(self, x: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """Draw every step's parameters for this batch, in order, and apply them."""
        n, h, w, _ = x.shape
        for step in self.steps:
            x = step.apply(x, step.draw(rng, n, h, w))
        return x


def parse_augment(text: str) -> Augment:
    """The :class:`Augment` of a text such as ``"shift2+mirror+turn"`` or ``"none"``.

    Raises
    ------
    AugmentError
        For an unknown transform, a missing or out-of-range number, a number
        where none belongs, or a transform given twice.
    """
    if not isinstance(text, str):
        raise AugmentError(f"augment must be a text such as \"shift2+mirror\" or \"none\", "
                           f"got {text!r}")
    value = text.strip().lower()
    if value == NONE:
        return Augment()
    found: dict[type, Transform] = {}
    for token in value.split("+"):
        m = _TOKEN.fullmatch(token.strip())
        kind = _WORDS.get(m.group(1)) if m else None
        if kind is None:
            raise AugmentError(f"augment {text!r}: {token.strip()!r} is not a transform; "
                               f"known: {FORMS}; join them with '+', or write 'none'")
        digits = m.group(2)
        limits = getattr(kind, "limits", None)
        if limits is None and digits:
            raise AugmentError(f"augment {text!r}: {kind.word} takes no number, got "
                               f"{token.strip()!r}; write {kind.word}")
        if limits is not None:
            lo, hi = limits
            if not digits or not lo <= int(digits) <= hi:
                raise AugmentError(f"augment {text!r}: {kind.word} needs a whole number "
                                   f"from {lo} to {hi} after it, got {token.strip()!r}; "
                                   f"e.g. {kind.word}{lo + (hi > lo)}")
        if kind in found:
            raise AugmentError(f"augment {text!r}: {kind.word} is given twice; give each "
                               "transform once")
        found[kind] = kind(int(digits)) if limits is not None else kind()
    return Augment(tuple(found[k] for k in ORDER if k in found))
