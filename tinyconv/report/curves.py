"""Learning curves of the finalists: accuracy by epoch, per rung, folds averaged.

Each panel names its candidate in full (wrapped at the layer dashes, never
cut) under a line saying its role: the pick, the best, or another finalist.
Rungs are counted from 1, as the search prints them. The shaded band around
the held-out curve spans the folds' lowest to highest accuracy at each epoch.
"""

from __future__ import annotations

import json
import math
import re
from typing import Mapping, Sequence

import matplotlib as mpl
import numpy as np
import pandas as pd
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from tinyconv.report.axes import PERCENT_FORMAT, chance_line, new_figure
from tinyconv.report.palette import PALETTE, style

_RUNG_STYLES = ("-", "--", "-.", ":")
#: The history keys of held-out and training accuracy (as train.History stores them).
HELD_OUT_KEY, TRAINING_KEY = "held_acc", "train_acc"


def history_of(value: object) -> dict[str, list[float]]:
    """A unit's per-epoch history as a dict of lists (accepts the stored JSON text).

    Missing or unreadable histories give an empty dict (the unit is then left
    out of the curves rather than drawn as zeros).
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return {}
    if isinstance(value, (str, bytes)):
        try:
            value = json.loads(value)
        except ValueError:
            return {}
    if not isinstance(value, Mapping):
        return {}
    return {str(k): [float("nan") if x is None else float(x) for x in v]
            for k, v in value.items() if isinstance(v, (list, tuple))}


def mean_curves(units: pd.DataFrame, key: str) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Per rung, (epoch numbers, mean over folds of ``history[key]``).

    The keys are the stored rungs (ladder levels, 0-based); see :func:`fold_grids`.

    Parameters
    ----------
    units : DataFrame
        Units of one candidate with ``rung``, ``epochs`` and ``history``.
    key : str
        ``"held_acc"`` or ``"train_acc"``.

    Notes
    -----
    A unit that resumed from a lower rung may store only its new epochs; its
    curve then starts at ``epochs - len(history) + 1`` so that the x-axis is
    always the total epoch count. Folds of unequal length (early stopping) are
    averaged over the folds still present at each epoch.
    """
    out = {}
    for rung, (epochs, grid) in fold_grids(units, key).items():
        with np.errstate(all="ignore"):
            out[rung] = (epochs, np.nanmean(grid, axis=0))
    return out


def fold_range(units: pd.DataFrame, key: str
               ) -> dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]]:
    """Per rung, (epoch numbers, lowest, highest over folds of ``history[key]``)."""
    out = {}
    for rung, (epochs, grid) in fold_grids(units, key).items():
        with np.errstate(all="ignore"):
            out[rung] = (epochs, np.nanmin(grid, axis=0), np.nanmax(grid, axis=0))
    return out


def fold_grids(units: pd.DataFrame, key: str) -> dict[int, tuple[np.ndarray, np.ndarray]]:
    """Per rung, (epoch numbers, (folds, epochs) grid of ``history[key]``, NaN where absent).

    A unit that resumed from a lower rung may store only its new epochs; its
    row then starts at ``epochs - len(history) + 1`` so that the x-axis is
    always the total epoch count.
    """
    out: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    for rung, sub in units.groupby("rung", sort=True):
        rows: list[np.ndarray] = []
        starts: list[int] = []
        for _, u in sub.iterrows():
            h = history_of(u.get("history"))
            vals = np.asarray(h.get(key, []), dtype=float)
            if vals.size == 0:
                continue
            total = int(u["epochs"]) if pd.notna(u.get("epochs")) else vals.size
            starts.append(max(total - vals.size, 0))
            rows.append(vals)
        if not rows:
            continue
        start = min(starts)
        length = max(s + r.size for s, r in zip(starts, rows)) - start
        grid = np.full((len(rows), length), np.nan)
        for i, (s, r) in enumerate(zip(starts, rows)):
            grid[i, s - start:s - start + r.size] = r
        out[int(rung)] = (np.arange(start + 1, start + length + 1), grid)
    return out


def _rung_label(units: pd.DataFrame, rung: int) -> str:
    """'rung 1 (9 epochs)' for stored rung 0 (counted from 1, as the search prints it)."""
    epochs = units.loc[units["rung"] == rung, "epochs"].dropna().unique()
    if len(epochs) == 1:
        e = int(epochs[0])
        return f"rung {rung + 1} ({e} epoch{'s' if e != 1 else ''})"
    return f"rung {rung + 1}"


def wrap_text(text: str, width: int = 34) -> str:
    """An architecture text on as many lines as it needs, broken after '/' or '-'."""
    pieces = [p for p in re.split(r"(?<=[/-])", text) if p]
    lines, line = [], ""
    for piece in pieces:
        if line and len(line) + len(piece) > width:
            lines.append(line)
            line = ""
        line += piece
    return "\n".join(lines + [line])


def role(candidate: object, pick: object, best: object) -> str:
    """What a panel's candidate is: the pick, the best, both, or another finalist."""
    if candidate == pick and candidate == best:
        return "\u2605 the pick, also the best"
    if candidate == pick:
        return "\u2605 the pick"
    return "the best (highest mean)" if candidate == best else "finalist"


def learning_curves(units: pd.DataFrame, finalists: Sequence[object], *,
                    labels: Mapping[object, str] | None = None,
                    chance: float | None = None, pick: object = None,
                    best: object = None) -> Figure:
    """Small multiples: one panel per finalist, held-out and training accuracy by epoch.

    Parameters
    ----------
    units : DataFrame
        Finished units with ``candidate``, ``fold``, ``rung``, ``epochs`` and
        ``history`` (JSON text or dict of per-epoch lists with ``train_acc``
        and ``held_acc``).
    finalists : sequence
        ``candidate`` values to draw, in panel order.
    labels : mapping, optional
        Panel titles per candidate (e.g. the architecture text).
    chance : float, optional
        Chance accuracy 1/K (dotted).
    pick, best : optional
        The picked and the best candidate; their panel titles say so.

    Returns
    -------
    Figure
        Each rung is one line style; lines are means over the folds, the band
        the folds' range of held-out accuracy.
    """
    finalists = list(finalists)
    if not finalists:
        raise ValueError("learning_curves needs at least one finalist")
    n = len(finalists)
    cols = min(n, 3)
    rows = math.ceil(n / cols)
    rungs_seen: set[int] = set()
    titles = [wrap_text(str((labels or {}).get(c, c))) for c in finalists]
    title_lines = max(t.count("\n") + 2 for t in titles)
    with mpl.rc_context(style()):
        fig = new_figure(3.6 * cols + 0.4, (2.6 + 0.17 * title_lines) * rows + 0.5)
        axes = np.atleast_1d(fig.subplots(rows, cols, sharey=True, squeeze=False)).ravel()
        for ax, cand, title in zip(axes, finalists, titles):
            sub = units[units["candidate"] == cand]
            drew = False
            for rung, (ep, lo, hi) in fold_range(sub, HELD_OUT_KEY).items():
                ax.fill_between(ep, lo, hi, color=PALETTE.band, linewidth=0, zorder=0)
            for key, colour in ((TRAINING_KEY, PALETTE.training),
                                (HELD_OUT_KEY, PALETTE.held_out)):
                for rung, (ep, mean) in mean_curves(sub, key).items():
                    rungs_seen.add(rung)
                    ax.plot(ep, mean, color=colour, linestyle=_RUNG_STYLES[rung % len(_RUNG_STYLES)],
                            linewidth=1.2 + 0.5 * min(rung, 3), marker="o" if ep.size < 4 else None,
                            markersize=3)
                    drew = True
            if not drew:
                ax.text(0.5, 0.5, "no per-epoch history stored", transform=ax.transAxes,
                        ha="center", va="center", color=PALETTE.chance, fontsize=9)
            chance_line(ax, chance)
            ax.set_title(role(cand, pick, best) + "\n" + title, fontsize=8.5, loc="left",
                         color=PALETTE.pick if cand == pick else PALETTE.ink,
                         fontweight="bold" if cand in (pick, best) else "normal")
            ax.set_xlabel("epoch")
            ax.yaxis.set_major_formatter(PERCENT_FORMAT)
        for ax in axes[n:]:
            ax.set_visible(False)
        for ax in axes[::cols]:
            ax.set_ylabel("accuracy (%)")
        handles = [Line2D([], [], color=PALETTE.held_out, label="held-out"),
                   Patch(facecolor=PALETTE.band, label="held-out, range over folds"),
                   Line2D([], [], color=PALETTE.training, label="training")]
        handles += [Line2D([], [], color=PALETTE.ink, linestyle=_RUNG_STYLES[r % len(_RUNG_STYLES)],
                           linewidth=1.2 + 0.5 * min(r, 3), label=_rung_label(units, r))
                    for r in sorted(rungs_seen)]
        fig.legend(handles=handles, loc="outside lower center", ncols=len(handles))
        fig.suptitle("Learning curves of the finalists (mean over folds)", x=0.01,
                     ha="left", fontsize=11, fontweight="bold")
    return fig
