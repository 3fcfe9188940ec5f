"""Thumbnails of real misclassified images: frequent confusions and confident mistakes.

Each gallery is drawn as one mosaic image under a single axes (thumbnails
enlarged by a whole factor, pixels kept sharp) with the captions as text:
far quicker to lay out than one axes per thumbnail. The mosaic is copied
into the rendered figure as it is (:class:`_Pixels`, nearest-neighbour to the
output resolution), not passed through an image artist's colour mapping and
resampling, which cost most of a gallery's drawing time. Given what the network
saw of each image (:func:`network_view`: its input size and colour mode), a
thumbnail shows the original and, beside it, that view at the same size.
"""

from __future__ import annotations

from typing import Mapping, Sequence

import matplotlib as mpl
import numpy as np
from matplotlib.artist import Artist
from matplotlib.figure import Figure

from tinyconv.arch import InputSpec

from tinyconv.report.palette import PALETTE, style

THUMB = 72     # displayed thumbnail side, in mosaic pixels (at least)
GAP = 10       # pixels between thumbnails
CAPTION = 30   # pixels under each thumbnail for its caption
PAIR_GAP = 4   # pixels between an image and the network's view of it


def confusion_examples(labels: np.ndarray, preds: np.ndarray, confidence: np.ndarray,
                       pairs: Sequence[tuple[int, int, int]], per_pair: int = 6
                       ) -> list[tuple[int, int, int, np.ndarray]]:
    """For each (true, predicted, count) pair, up to ``per_pair`` example positions.

    Parameters
    ----------
    labels, preds : ndarray, shape (n,)
    confidence : ndarray, shape (n,)
        The probability given to the predicted class (examples are shown most
        confident first; ties by position).
    pairs : from :func:`tinyconv.report.confusion.top_confusions`

    Returns
    -------
    list of (true, predicted, count, positions) with positions into the arrays.
    """
    out = []
    for t, p, c in pairs:
        where = np.flatnonzero((labels == t) & (preds == p))
        order = np.lexsort((where, -confidence[where]))
        out.append((t, p, c, where[order][:per_pair]))
    return out


def confident_mistakes(labels: np.ndarray, preds: np.ndarray, confidence: np.ndarray,
                       n: int = 12) -> np.ndarray:
    """Positions of the ``n`` wrong predictions made with the highest confidence."""
    wrong = np.flatnonzero(np.asarray(labels) != np.asarray(preds))
    order = np.lexsort((wrong, -np.asarray(confidence)[wrong]))
    return wrong[order][:n]


def thumbnail(image: np.ndarray, side: int = THUMB) -> np.ndarray:
    """An image enlarged by the whole factor that brings its longer side to >= ``side``.

    Parameters
    ----------
    image : ndarray, shape (h, w, c) or (h, w), uint8; c is 1 or 3

    Returns
    -------
    ndarray, shape (f*h, f*w, 3), uint8 (grey images repeated over 3 channels)
    """
    img = np.asarray(image)
    if img.ndim == 2:
        img = img[..., None]
    if img.shape[-1] == 1:
        img = np.repeat(img, 3, axis=-1)
    img = img[..., :3]
    f = max(1, -(-side // max(img.shape[:2])))
    return np.repeat(np.repeat(img, f, axis=0), f, axis=1)   # nearest-neighbour, (f*h, f*w, 3)


def network_view(images: np.ndarray, spec: InputSpec) -> np.ndarray:
    """What a network reading ``spec`` sees of ``images``, as viewable 8-bit pixels.

    The images resized to the network's input (:func:`tinyconv.data.prepare`)
    and, for ``gray``, turned grey; the ``ycc`` and ``hsv`` modes are not
    viewable as colours, so for them the resized RGB is shown (the caption
    names the mode). Returns (n, spec.h, spec.w, 1 or 3) uint8.
    """
    from tinyconv.data import prepare
    from tinyconv.quant import as_pixels

    shown = spec if spec.mode in ("rgb", "gray") else InputSpec(spec.h, spec.w, "rgb")
    return as_pixels(prepare(np.asarray(images), shown))


def side_by_side(original: np.ndarray, seen: np.ndarray | None,
                 side: int = THUMB) -> np.ndarray:
    """The original's thumbnail and, when given, the network's view at the same height."""
    left = thumbnail(original, side)
    if seen is None:
        return left
    view = np.asarray(seen)
    f = max(1, round(left.shape[0] / view.shape[0]))
    right = thumbnail(view, 1)
    right = np.repeat(np.repeat(right, f, axis=0), f, axis=1)
    h = max(left.shape[0], right.shape[0])
    out = np.full((h, left.shape[1] + PAIR_GAP + right.shape[1], 3), 255, np.uint8)
    out[:left.shape[0], :left.shape[1]] = left
    out[:right.shape[0], left.shape[1] + PAIR_GAP:] = right
    return out


class _Mosaic:
    """A white canvas of cells; thumbnails pasted centred in their cell."""

    def __init__(self, rows: int, cols: int, cell: tuple[int, int], left: int = 0):
        self.cell_h, self.cell_w = cell
        self.left = left
        h = rows * (self.cell_h + CAPTION + GAP) + GAP
        w = left + cols * (self.cell_w + GAP) + GAP
        self.canvas = np.full((h, w, 3), 255, dtype=np.uint8)

    def origin(self, r: int, c: int) -> tuple[int, int]:
        """Top-left pixel (y, x) of cell (r, c)."""
        return (GAP + r * (self.cell_h + CAPTION + GAP),
                self.left + GAP + c * (self.cell_w + GAP))

    def paste(self, r: int, c: int, thumb: np.ndarray) -> None:
        y, x = self.origin(r, c)
        th, tw = thumb.shape[:2]
        y += (self.cell_h - th) // 2
        x += (self.cell_w - tw) // 2
        self.canvas[y:y + th, x:x + tw] = thumb
        # a thin frame so light images keep their edge on white
        rule = np.array([int(PALETTE.rule[i:i + 2], 16) for i in (1, 3, 5)], dtype=np.uint8)
        self.canvas[y - 1, x - 1:x + tw + 1] = rule
        self.canvas[y + th, x - 1:x + tw + 1] = rule
        self.canvas[y - 1:y + th + 1, x - 1] = rule
        self.canvas[y - 1:y + th + 1, x + tw] = rule


class _Pixels(Artist):
    """An RGB canvas drawn at the bottom left of its figure, 1 canvas pixel per 1/96 inch.

    At render time the canvas is enlarged to the renderer's resolution by
    nearest neighbour (each output pixel takes the canvas pixel under its
    corner) and handed to the renderer as it is.
    """

    def __init__(self, canvas: np.ndarray):
        super().__init__()
        self.canvas = canvas
        self.set_zorder(-1)   # under the captions

    def draw(self, renderer) -> None:
        scale = renderer.dpi / 96
        h, w = self.canvas.shape[:2]
        rows = np.minimum((np.arange(round(h * scale)) / scale).astype(np.intp), h - 1)
        cols = np.minimum((np.arange(round(w * scale)) / scale).astype(np.intp), w - 1)
        rgba = np.empty((rows.size, cols.size, 4), np.uint8)
        rgba[..., :3] = self.canvas[rows[::-1]][:, cols]   # the renderer's rows go upwards
        rgba[..., 3] = 255
        gc = renderer.new_gc()
        renderer.draw_image(gc, 0, 0, rgba)
        gc.restore()
        self.stale = False


def _figure(canvas: np.ndarray, title: str) -> tuple[Figure, object]:
    """A figure showing ``canvas`` at 1 canvas pixel per 1/96 inch (CSS pixel), with a title."""
    h, w = canvas.shape[:2]
    head = 34
    fig = Figure(figsize=(w / 96, (h + head) / 96), dpi=144)
    fig.add_artist(_Pixels(canvas))
    ax = fig.add_axes((0, 0, 1, h / (h + head)))
    ax.set_xlim(0, w)
    ax.set_ylim(h, 0)
    ax.axis("off")
    fig.text(0.01, 1 - 8 / (h + head), title, ha="left", va="top", fontsize=11,
             fontweight="bold", color=PALETTE.ink)
    return fig, ax


def _cell_size(images: np.ndarray, seen: Mapping[int, np.ndarray] | None) -> tuple[int, int]:
    first = next(iter(seen.values())) if seen else None
    t = side_by_side(images[0], first)
    return t.shape[0], t.shape[1]


def _thumb(images: np.ndarray, i: int, seen: Mapping[int, np.ndarray] | None) -> np.ndarray:
    return side_by_side(images[i], seen.get(i) if seen else None)


def _title(title: str, seen_as: str | None) -> str:
    return title if not seen_as else f"{title}: each image, then as the network saw it ({seen_as})"


def confusion_gallery(images: np.ndarray, examples: list[tuple[int, int, int, np.ndarray]],
                      classes: Sequence[str], *, confidence: np.ndarray | None = None,
                      source: np.ndarray | None = None,
                      seen: Mapping[int, np.ndarray] | None = None,
                      seen_as: str | None = None) -> Figure:
    """One row per frequent confusion: the two classes and the count, then real thumbnails.

    Parameters
    ----------
    images : ndarray, shape (N, h, w, c), uint8
        The data set's images.
    examples : from :func:`confusion_examples`
    classes : class names
    confidence : ndarray, shape (n,), optional
        Probability of the predicted class per position (shown under each image).
    source : ndarray, shape (n,), optional
        Index into ``images`` of each position (identity when omitted).
    seen : mapping of image index to the network's view (:func:`network_view`), optional
    seen_as : the network's input (e.g. ``16x16 gray``) for the title, with ``seen``
    """
    title = _title("Most frequent confusions of the pick (real held-out images)", seen_as)
    with mpl.rc_context(style()):
        if not examples:
            fig, ax = _figure(np.full((60, 480, 3), 255, np.uint8), title)
            ax.text(240, 30, "no mistakes on the held-out folds", ha="center", va="center")
            return fig
        per = max(len(e[3]) for e in examples)
        cell = _cell_size(images, seen)
        label_w = 150
        m = _Mosaic(len(examples), per, cell, left=label_w)
        for r, (_t, _p, _c, pos) in enumerate(examples):
            for k, q in enumerate(pos):
                m.paste(r, k, _thumb(images, int(source[q]) if source is not None else int(q),
                                     seen))
        fig, ax = _figure(m.canvas, title)
        for r, (t, p, c, pos) in enumerate(examples):
            y, _x = m.origin(r, 0)
            ax.text(8, y + 10, f"true  {classes[t]}", fontsize=9, fontweight="bold",
                    color=PALETTE.held_out, va="top")
            ax.text(8, y + 28, f"taken for  {classes[p]}", fontsize=9, color=PALETTE.pick,
                    va="top")
            ax.text(8, y + 46, f"{c} image{'s' if c != 1 else ''}", fontsize=8,
                    color=PALETTE.chance, va="top")
            if confidence is not None:
                for k, q in enumerate(pos):
                    yy, xx = m.origin(r, k)
                    ax.text(xx + cell[1] / 2, yy + cell[0] + 4, f"p={confidence[q]:.2f}",
                            fontsize=7, ha="center", va="top", color=PALETTE.ink)
    return fig


def mistakes_gallery(images: np.ndarray, positions: np.ndarray, labels: np.ndarray,
                     preds: np.ndarray, confidence: np.ndarray, classes: Sequence[str], *,
                     source: np.ndarray | None = None, cols: int = 6,
                     seen: Mapping[int, np.ndarray] | None = None,
                     seen_as: str | None = None) -> Figure:
    """A grid of the most confident mistakes, true and predicted class under each
    (with the network's view beside each image when ``seen`` is given)."""
    title = _title("Most confident mistakes of the pick", seen_as)
    n = len(positions)
    with mpl.rc_context(style()):
        if n == 0:
            fig, ax = _figure(np.full((60, 480, 3), 255, np.uint8), title)
            ax.text(240, 30, "no mistakes on the held-out folds", ha="center", va="center")
            return fig
        cell = _cell_size(images, seen)
        cell = (cell[0], max(cell[1], 110))          # room for the two-line caption
        rows = -(-n // cols)
        m = _Mosaic(rows, min(cols, n), cell)
        for i, q in enumerate(positions):
            m.paste(i // cols, i % cols,
                    _thumb(images, int(source[q]) if source is not None else int(q), seen))
        fig, ax = _figure(m.canvas, title)
        for i, q in enumerate(positions):
            y, x = m.origin(i // cols, i % cols)
            ax.text(x + cell[1] / 2, y + cell[0] + 3,
                    f"true {classes[labels[q]]}\nsaid {classes[preds[q]]} (p={confidence[q]:.2f})",
                    fontsize=7, ha="center", va="top", color=PALETTE.ink, linespacing=1.2)
    return fig
