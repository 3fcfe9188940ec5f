"""Thumbnails of real misclassified images: frequent confusions and confident mistakes."""

from __future__ import annotations

from typing import Sequence

import numpy as np
from matplotlib.figure import Figure

import matplotlib as mpl

from tinyconv.report.axes import new_figure
from tinyconv.report.palette import PALETTE, style


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


def _show(ax, image: np.ndarray) -> None:
    """One thumbnail, pixels kept sharp (nearest), no axes."""
    img = np.asarray(image)
    if img.ndim == 3 and img.shape[-1] == 1:
        img = img[..., 0]
    if img.ndim == 2:
        ax.imshow(img, cmap="gray", vmin=0, vmax=255, interpolation="nearest")
    else:
        ax.imshow(img, interpolation="nearest")
    ax.set_xticks([])
    ax.set_yticks([])
    for s in ax.spines.values():
        s.set_visible(True)
        s.set_color(PALETTE.rule)


def confusion_gallery(images: np.ndarray, examples: list[tuple[int, int, int, np.ndarray]],
                      classes: Sequence[str], *, confidence: np.ndarray | None = None,
                      source: np.ndarray | None = None) -> Figure:
    """One row per frequent confusion: a label cell, then real thumbnails.

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
    """
    per = max((len(e[3]) for e in examples), default=0)
    rows = max(len(examples), 1)
    cols = per + 1
    with mpl.rc_context(style()):
        fig = new_figure(1.15 * cols + 1.2, 1.35 * rows + 0.5)
        if not examples:
            ax = fig.add_subplot()
            ax.axis("off")
            ax.text(0.5, 0.5, "no mistakes on the held-out folds", ha="center", va="center")
            return fig
        grid = fig.add_gridspec(rows, cols, width_ratios=[2.2] + [1] * per)
        for r, (t, p, c, pos) in enumerate(examples):
            lab = fig.add_subplot(grid[r, 0])
            lab.axis("off")
            lab.text(0.0, 0.62, f"true  {classes[t]}", fontsize=9, fontweight="bold",
                     color=PALETTE.held_out, transform=lab.transAxes)
            lab.text(0.0, 0.40, f"taken for  {classes[p]}", fontsize=9,
                     color=PALETTE.pick, transform=lab.transAxes)
            lab.text(0.0, 0.18, f"{c} image{'s' if c != 1 else ''}", fontsize=8,
                     color=PALETTE.chance, transform=lab.transAxes)
            for k, q in enumerate(pos):
                ax = fig.add_subplot(grid[r, k + 1])
                _show(ax, images[int(source[q]) if source is not None else int(q)])
                if confidence is not None:
                    ax.set_xlabel(f"p={confidence[q]:.2f}", fontsize=7, labelpad=1)
        fig.suptitle("Most frequent confusions of the pick (real held-out images)",
                     x=0.01, ha="left", fontsize=11, fontweight="bold")
    return fig


def mistakes_gallery(images: np.ndarray, positions: np.ndarray, labels: np.ndarray,
                     preds: np.ndarray, confidence: np.ndarray, classes: Sequence[str], *,
                     source: np.ndarray | None = None, cols: int = 6) -> Figure:
    """A grid of the most confident mistakes, true and predicted class under each."""
    n = len(positions)
    rows = max(1, -(-n // cols))
    with mpl.rc_context(style()):
        fig = new_figure(1.7 * cols, 2.05 * rows + 0.4)
        if n == 0:
            ax = fig.add_subplot()
            ax.axis("off")
            ax.text(0.5, 0.5, "no mistakes on the held-out folds", ha="center", va="center")
            return fig
        axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False)).ravel()
        for ax, q in zip(axes, positions):
            _show(ax, images[int(source[q]) if source is not None else int(q)])
            ax.set_xlabel(f"true {classes[labels[q]]}\nsaid {classes[preds[q]]} "
                          f"(p={confidence[q]:.2f})", fontsize=7.5, labelpad=2)
        for ax in axes[n:]:
            ax.set_visible(False)
        fig.suptitle("Most confident mistakes of the pick", x=0.01, ha="left",
                     fontsize=11, fontweight="bold")
    return fig
