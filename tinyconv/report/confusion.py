"""The pick's confusions over all held-out folds: counts, rates, precision, recall."""

from __future__ import annotations

from typing import Sequence

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from tinyconv.report.axes import new_figure
from tinyconv.report.palette import PALETTE, sequential_map, style


def confusion_counts(labels: np.ndarray, preds: np.ndarray, n_classes: int) -> np.ndarray:
    """Counts ``C[i, j]`` of images of true class i predicted as class j.

    Parameters
    ----------
    labels, preds : ndarray, shape (n,)
        Integer classes in ``0..n_classes-1``.

    Returns
    -------
    ndarray, shape (K, K), int64
    """
    labels = np.asarray(labels, dtype=np.int64)
    preds = np.asarray(preds, dtype=np.int64)
    if labels.shape != preds.shape:
        raise ValueError(f"labels {labels.shape} and predictions {preds.shape} differ in shape")
    bad = (labels < 0) | (labels >= n_classes) | (preds < 0) | (preds >= n_classes)
    if bad.any():
        raise ValueError(f"{int(bad.sum())} labels or predictions fall outside 0..{n_classes - 1}")
    counts = np.zeros((n_classes, n_classes), dtype=np.int64)
    np.add.at(counts, (labels, preds), 1)
    return counts


def row_rates(counts: np.ndarray) -> np.ndarray:
    """Each row divided by its total (recall on the diagonal); empty rows stay 0."""
    counts = np.asarray(counts, dtype=float)
    totals = counts.sum(axis=1, keepdims=True)
    return np.divide(counts, totals, out=np.zeros_like(counts), where=totals > 0)


def per_class_table(counts: np.ndarray, classes: Sequence[str]) -> pd.DataFrame:
    """Per class: images (support), predicted, correct, precision and recall.

    Notes
    -----
    precision_k = C[k, k] / sum_i C[i, k]; recall_k = C[k, k] / sum_j C[k, j];
    a class never predicted has precision NaN (undefined), not 0.
    """
    counts = np.asarray(counts)
    diag = np.diag(counts).astype(float)
    predicted = counts.sum(axis=0).astype(float)
    support = counts.sum(axis=1).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        precision = np.where(predicted > 0, diag / predicted, np.nan)
        recall = np.where(support > 0, diag / support, np.nan)
    return pd.DataFrame({
        "class": list(classes), "images": support.astype(int), "predicted": predicted.astype(int),
        "correct": diag.astype(int), "precision": precision, "recall": recall,
    })


def top_confusions(counts: np.ndarray, n: int = 6) -> list[tuple[int, int, int]]:
    """The ``n`` most frequent off-diagonal (true, predicted, count), largest first.

    Ties go to the lower (true, predicted) pair, so the order is deterministic.
    """
    counts = np.asarray(counts)
    k = counts.shape[0]
    pairs = [(int(counts[i, j]), i, j) for i in range(k) for j in range(k)
             if i != j and counts[i, j] > 0]
    pairs.sort(key=lambda t: (-t[0], t[1], t[2]))
    return [(i, j, c) for c, i, j in pairs[:n]]


def confusion_figure(counts: np.ndarray, classes: Sequence[str]) -> Figure:
    """Two heat maps side by side: counts, and rows normalised to their totals.

    Parameters
    ----------
    counts : ndarray, shape (K, K)
        From :func:`confusion_counts`.
    classes : sequence of str, length K
    """
    counts = np.asarray(counts)
    k = counts.shape[0]
    rates = row_rates(counts)
    cmap = sequential_map()
    side = max(3.4, min(7.0, 0.42 * k + 1.6))
    with mpl.rc_context(style()):
        fig = new_figure(2 * side + 1.2, side)
        axes = fig.subplots(1, 2)
        for ax, values, title, fmt in ((axes[0], counts.astype(float), "Counts", "{:.0f}"),
                                       (axes[1], rates, "Share of each true class", "{:.0%}")):
            vmax = values.max() if values.max() > 0 else 1.0
            im = ax.imshow(values, cmap=cmap, vmin=0, vmax=vmax if values is not rates else 1.0)
            ax.grid(False)
            for i in range(k):
                for j in range(k):
                    v = values[i, j]
                    if v == 0 and i != j:
                        continue
                    shade = v / (vmax if values is not rates else 1.0)
                    ax.text(j, i, fmt.format(v), ha="center", va="center",
                            fontsize=7 if k > 10 else 8,
                            color=PALETTE.paper if shade > 0.5 else PALETTE.ink)
            ax.set_xticks(range(k), list(classes), rotation=45, ha="right")
            ax.set_yticks(range(k), list(classes))
            ax.set_xlabel("predicted class")
            ax.set_ylabel("true class")
            ax.set_title(title)
            for s in ax.spines.values():
                s.set_visible(False)
            fig.colorbar(im, ax=ax, shrink=0.8,
                         label="images (count)" if values is not rates else "share of row")
    return fig
