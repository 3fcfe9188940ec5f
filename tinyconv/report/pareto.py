"""Held-out accuracy against size: the trade-off, its front, the band and the pick."""

from __future__ import annotations

from typing import Mapping

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from search.ranking import Ranking
from tinyconv.report.axes import (PERCENT_FORMAT, SI_FORMAT, chance_line, new_figure, si,
                                  spans_decades)
from tinyconv.report.palette import PALETTE, style

AXIS_LABELS = {"params": "parameters (count)", "macs": "multiply-accumulates per image (MACs)"}
FRONT_COLUMNS = {"params": "pareto_params", "macs": "pareto_macs"}


def pareto_plot(ranking: pd.DataFrame, x: str = "params", *, budget: float | None = None,
                chance: float | None = None,
                names: Mapping[str, str] | None = None) -> Figure:
    """Mean held-out accuracy (± one SE) against ``x`` for every ranked candidate.

    Parameters
    ----------
    ranking : DataFrame
        The ranking (see DEVELOPERS.md): uses ``candidate``, ``x`` (``params``
        or ``macs``), ``acc_mean``, ``acc_se``, ``pareto_params`` /
        ``pareto_macs`` (bool), ``pick`` (bool).
    x : {"params", "macs"}
        The size axis.
    budget : float, optional
        The run's budget on this axis, drawn as a dashed vertical line.
    chance : float, optional
        Chance accuracy 1/K, a dotted horizontal line.
    names : mapping of candidate to a short label, optional
        The points on the front, the pick and the best carry their label (the
        report uses the row's place in the ranking table), and a key under the
        axes gives each label's architecture text.

    Returns
    -------
    Figure
        Error bars are one standard error of the fold mean. The shaded band
        runs from the best mean minus its SE up to the best mean: candidates
        whose mean lies in it are "within one SE" of the best. The Pareto front
        (no other candidate both smaller and more accurate) is a stepped line.
    """
    if x not in AXIS_LABELS:
        raise ValueError(f"x must be 'params' or 'macs', not {x!r}")
    if ranking.empty:
        raise ValueError("pareto_plot needs at least one ranked candidate")
    df = ranking.sort_values(x, kind="stable")
    xs = df[x].to_numpy(dtype=float)
    ys = df["acc_mean"].to_numpy(dtype=float)
    se = np.nan_to_num(df["acc_se"].to_numpy(dtype=float))
    front = df[FRONT_COLUMNS[x]].to_numpy(dtype=bool)
    pick = df["pick"].to_numpy(dtype=bool)
    # the best of highest mean, ties to the smaller size (search.ranking.Ranking.best_least)
    best = df.index.get_loc(Ranking(df).best_least(x).name)
    lo_band = ys[best] - se[best]

    named = _named(df, front | pick | (np.arange(len(df)) == best), names)
    with mpl.rc_context(style()):
        fig = new_figure(6.4, 4.9 + 0.16 * len(named))
        if named:
            ax, key = fig.subplots(2, 1, height_ratios=(4.4, 0.16 * len(named) + 0.1))
            _key(key, named)
        else:
            ax = fig.add_subplot()
        ax.axhspan(lo_band, ys[best], color=PALETTE.band, linewidth=0, zorder=0)
        ax.axhline(lo_band, color=PALETTE.training, linewidth=1.0, linestyle="-", zorder=1)
        chance_line(ax, chance)
        if budget is not None and np.isfinite(budget):
            ax.axvline(budget, color=PALETTE.budget, linestyle="--", linewidth=1.3, zorder=2)
            ax.annotate(f"budget {si(budget)}", (budget, 0.02), xycoords=("data", "axes fraction"),
                        rotation=90, ha="right", va="bottom", color=PALETTE.budget, fontsize=8,
                        xytext=(-3, 0), textcoords="offset points")
        rest = ~front & ~pick
        ax.errorbar(xs[rest], ys[rest], yerr=se[rest], fmt="o", markersize=5,
                    color=PALETTE.other, ecolor=PALETTE.other, elinewidth=1, capsize=2,
                    markeredgecolor=PALETTE.ink, markeredgewidth=0.5, zorder=3)
        if front.any():
            fx, fy = xs[front], ys[front]
            ax.step(fx, fy, where="post", color=PALETTE.front, linewidth=1.4, zorder=3)
            ax.errorbar(fx, fy, yerr=se[front], fmt="D", markersize=5, color=PALETTE.front,
                        ecolor=PALETTE.front, elinewidth=1, capsize=2,
                        markeredgecolor=PALETTE.ink, markeredgewidth=0.5, zorder=4)
        if pick.any():
            ax.errorbar(xs[pick], ys[pick], yerr=se[pick], fmt="*", markersize=15,
                        color=PALETTE.pick, ecolor=PALETTE.pick, elinewidth=1.4, capsize=3,
                        markeredgecolor=PALETTE.ink, markeredgewidth=0.6, zorder=5)
            i = int(np.flatnonzero(pick)[0])
            right = i >= len(xs) / 2  # keep the label inside the axes
            ax.annotate("pick", (xs[i], ys[i]), xytext=(-10 if right else 10, -16),
                        textcoords="offset points", ha="right" if right else "left",
                        color=PALETTE.pick, fontweight="bold", fontsize=9)
        for i, label in _labels(df, named):
            ax.annotate(label, (xs[i], ys[i]), xytext=(5, 5), textcoords="offset points",
                        fontsize=8, fontweight="bold", color=PALETTE.ink, zorder=6)
        if spans_decades(xs):
            ax.set_xscale("log")
            ax.set_xlabel(AXIS_LABELS[x].replace(")", ", log scale)"))
        else:
            ax.set_xlabel(AXIS_LABELS[x])
        ax.xaxis.set_major_formatter(SI_FORMAT)
        ax.xaxis.set_minor_formatter(SI_FORMAT if not spans_decades(xs) else "")
        ax.yaxis.set_major_formatter(PERCENT_FORMAT)
        ax.set_ylabel("held-out accuracy, mean \u00b1 SE (%)")
        handles = [
            Line2D([], [], marker="*", color=PALETTE.pick, markeredgecolor=PALETTE.ink,
                   markersize=12, linestyle="none", label="pick (one-SE rule)"),
            Line2D([], [], marker="D", color=PALETTE.front, markeredgecolor=PALETTE.ink,
                   linestyle="-", label="Pareto front"),
            Line2D([], [], marker="o", color=PALETTE.other, markeredgecolor=PALETTE.ink,
                   linestyle="none", label="other candidates"),
            Patch(facecolor=PALETTE.band, edgecolor=PALETTE.training,
                  label="within one SE of the best"),
        ]
        if budget is not None:
            handles.append(Line2D([], [], color=PALETTE.budget, linestyle="--", label="budget"))
        if chance is not None:
            handles.append(Line2D([], [], color=PALETTE.chance, linestyle=":",
                                  label=f"chance {100 * chance:.1f}%"))
        fig.legend(handles=handles, loc="outside lower center", ncols=3)
        word = "parameters" if x == "params" else "MACs"
        ax.set_title(f"Held-out accuracy against {word}")
    return fig


def _named(df: pd.DataFrame, shown: np.ndarray, names: Mapping[str, str] | None
           ) -> list[tuple[str, str]]:
    """(label, candidate) of the points that carry a label, in the labels' order."""
    if not names:
        return []
    found = [(names[c], c) for c, s in zip(df["candidate"], shown) if s and c in names]
    return sorted(found, key=lambda item: (len(item[0]), item[0]))


def _labels(df: pd.DataFrame, named: list[tuple[str, str]]) -> list[tuple[int, str]]:
    """(position in ``df``, label) of each labelled point."""
    where = {c: i for i, c in enumerate(df["candidate"])}
    return [(where[c], label) for label, c in named]


def _key(ax, named: list[tuple[str, str]]) -> None:
    """Each label with its architecture text, one a line, on an empty axes."""
    ax.axis("off")
    n = len(named)
    for i, (label, cand) in enumerate(named):
        ax.text(0.0, 1.0 - (i + 0.5) / n, f"{label:>3}  {cand}", transform=ax.transAxes,
                ha="left", va="center", fontsize=7.5, family="monospace", color=PALETTE.ink)
