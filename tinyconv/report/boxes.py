"""Per-fold held-out and training accuracy, one pair of boxes per candidate."""

from __future__ import annotations

import math

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from tinyconv.report.axes import PERCENT_FORMAT, chance_line, new_figure, si, spans_decades
from tinyconv.report.palette import PALETTE, style


def fold_boxes(folds: pd.DataFrame, *, chance: float | None = None,
               pick: object = None) -> Figure:
    """Box plots of per-fold accuracy, held-out beside training, by parameter count.

    Parameters
    ----------
    folds : DataFrame
        One row per (candidate, fold) at the candidate's ranked rung, with
        columns ``candidate``, ``params``, ``fold``, ``held_acc``, ``train_acc``
        (accuracies in [0, 1]) and optionally ``finalist`` (bool): candidates
        stopped at a lower rung are drawn faded and hatched.
    chance : float, optional
        Chance accuracy 1/K, drawn as a dotted line.
    pick : optional
        The picked candidate's ``candidate`` value; its label is marked.

    Returns
    -------
    Figure
        Candidates ordered by parameter count. When the counts span at least a
        decade and no two candidates sit too close on a log axis, the boxes are
        placed at log10(parameters); otherwise evenly, with the count as label.
        Over-fitting shows as the distance between a candidate's two boxes.
    """
    if folds.empty:
        raise ValueError("fold_boxes needs at least one (candidate, fold) row")
    order = (folds.groupby("candidate", sort=False)["params"].first()
             .sort_values(kind="stable"))
    names = list(order.index)
    params = order.to_numpy(dtype=float)
    n = len(names)
    logpos = np.log10(np.maximum(params, 1.0))
    # A log axis only when no two candidates would overlap on it (closest pair
    # at least 6% of the span apart); else even spacing, labelled by count.
    use_log = bool(n > 1 and spans_decades(params)
                   and np.min(np.diff(logpos)) >= 0.06 * (logpos[-1] - logpos[0]))
    if use_log:
        pos = logpos
        width = float(np.clip(0.3 * np.min(np.diff(pos)), 0.02, 0.12))
    else:
        pos = np.arange(n, dtype=float)
        width = 0.32

    with mpl.rc_context(style()):
        fig = new_figure(max(7.5, min(12.0, 1.0 + 0.6 * n)), 4.8)
        ax = fig.add_subplot()
        final = (folds.groupby("candidate", sort=False)["finalist"].first().reindex(names)
                 .fillna(True).to_numpy(dtype=bool) if "finalist" in folds.columns
                 else np.ones(n, dtype=bool))
        for key, colour, shift in (("held_acc", PALETTE.held_out, -0.55),
                                   ("train_acc", PALETTE.training, 0.55)):
            data = [folds.loc[folds["candidate"] == c, key].dropna().to_numpy() for c in names]
            for group in (True, False):
                where = [i for i, d in enumerate(data) if d.size and final[i] == group]
                if not where:
                    continue
                bp = ax.boxplot(
                    [data[i] for i in where], positions=pos[where] + shift * width,
                    widths=width, patch_artist=True, manage_ticks=False,
                    medianprops={"color": PALETTE.paper if key == "held_acc" else PALETTE.ink,
                                 "linewidth": 1.6},
                    boxprops={"facecolor": colour, "edgecolor": PALETTE.ink, "linewidth": 0.8},
                    whiskerprops={"color": PALETTE.ink, "linewidth": 0.8},
                    capprops={"color": PALETTE.ink, "linewidth": 0.8},
                    flierprops={"marker": "o", "markersize": 3, "markerfacecolor": colour,
                                "markeredgecolor": PALETTE.ink})
                if not group:  # stopped at a lower rung: fewer epochs, drawn faded
                    for patch in bp["boxes"]:
                        patch.set_alpha(0.45)
                        patch.set_hatch("////")
        # thin connector between the two medians: the over-fitting gap
        for i, c in enumerate(names):
            sub = folds.loc[folds["candidate"] == c]
            v, t = sub["held_acc"].median(), sub["train_acc"].median()
            if math.isfinite(v) and math.isfinite(t):
                ax.plot([pos[i] - 0.55 * width, pos[i] + 0.55 * width], [v, t],
                        color=PALETTE.ink, linewidth=0.6, alpha=0.6, zorder=4)
        chance_line(ax, chance)
        ax.yaxis.set_major_formatter(PERCENT_FORMAT)
        ax.set_ylabel("accuracy per fold (%)")
        if use_log:
            lo, hi = math.floor(pos[0] - width * 2), math.ceil(pos[-1] + width * 2)
            ticks = [d + math.log10(m) for d in range(lo, hi + 1) for m in (1, 2, 5)
                     if pos[0] - 3 * width <= d + math.log10(m) <= pos[-1] + 3 * width]
            ax.set_xticks(ticks, [si(10 ** t) for t in ticks])
            ax.set_xlim(pos[0] - 3 * width, pos[-1] + 3 * width)
            ax.set_xlabel("parameters (count, log scale)")
        else:
            labels = [si(p, digits=3) + ("\u2605" if c == pick else "")
                      for c, p in zip(names, params)]
            ax.set_xticks(pos, labels, rotation=45 if n > 10 else 0)
            ax.set_xlim(-0.7, n - 0.3)
            ax.set_xlabel("candidates ordered by parameters (count)")
        if pick is not None and pick in names:
            i = names.index(pick)
            ax.annotate("pick \u2605", (pos[i], 0.99), xycoords=("data", "axes fraction"),
                        ha="center", va="top", color=PALETTE.pick, fontsize=9,
                        fontweight="bold")
            ax.axvspan(pos[i] - 1.3 * width, pos[i] + 1.3 * width, color=PALETTE.band,
                       zorder=0, linewidth=0)
        ax.grid(axis="x", visible=False)
        handles = [Patch(facecolor=PALETTE.held_out, edgecolor=PALETTE.ink, label="held-out fold"),
                   Patch(facecolor=PALETTE.training, edgecolor=PALETTE.ink, label="training"),
                   Line2D([], [], color=PALETTE.ink, linewidth=0.6, label="gap between medians")]
        if not final.all():
            handles.append(Patch(facecolor=PALETTE.other, edgecolor=PALETTE.ink, alpha=0.45,
                                 hatch="////", label="stopped at a lower rung"))
        if chance is not None:
            handles.append(Line2D([], [], color=PALETTE.chance, linestyle=":",
                                  label=f"chance {100 * chance:.1f}%"))
        fig.legend(handles=handles, loc="outside lower center", ncols=min(len(handles), 3))
        ax.set_title("Held-out versus training accuracy, per fold")
    return fig
