"""From a run's plain data to the report's figures (PNG bytes) and tables (frames)."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from tinyconv.report.axes import png_bytes
from tinyconv.report.boxes import fold_boxes
from tinyconv.report.budgets import axis_budget, budget_rows
from tinyconv.report.confusion import (confusion_counts, confusion_figure, per_class_table,
                                       top_confusions)
from tinyconv.report.curves import learning_curves
from tinyconv.arch import parse
from tinyconv.report.gallery import (confident_mistakes, confusion_examples,
                                     confusion_gallery, mistakes_gallery, network_view)
from tinyconv.report.pareto import pareto_plot
from tinyconv.report.pick_cost import pick_cost_table
from tinyconv.report.rundata import RunData, fold_scores
from tinyconv.report.structure import structure_table

MAX_FINALIST_CURVES = 6
MAX_BOXES = 40   # more pairs of boxes than this are unreadable on one axis
N_CONFUSIONS = 6
PER_CONFUSION = 6
N_MISTAKES = 12


@dataclass
class Assembled:
    """The report's parts: figure PNGs, CSV frames, and values the page quotes."""

    figures: dict[str, bytes] = field(default_factory=dict)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    counts: np.ndarray | None = None
    curve_candidates: list[str] = field(default_factory=list)
    boxes_left_out: int = 0
    notices: list[str] = field(default_factory=list)
    reused: dict[str, bytes] = field(default_factory=dict)


def _keep(out: Assembled, name: str, draw: Callable[[], Figure]) -> None:
    """The figure ``name``: its PNG drawn from the same data before, else ``draw()`` rendered."""
    if name in out.reused:
        out.figures[name] = out.reused[name]
        return
    out.figures[name] = png_bytes(draw())  # the figure is dropped (clearing it costs more)


def recipe_titles(ranking: pd.DataFrame) -> dict[str, str] | None:
    """Panel titles "architecture / short recipe" when a run has several recipes, e.g.
    ``aug mirror+shift2 x8, lr 0.005 wd 0, constant`` under the architecture; else None."""
    if "recipe" not in ranking.columns or ranking["recipe"].nunique() < 2:
        return None
    out = {}
    for cand, arch, recipe in zip(ranking["candidate"], ranking["arch"], ranking["recipe"]):
        words = dict(w.split("=", 1) for w in str(recipe).split())
        out[cand] = (f"{arch}\n{words.get('aug')} x{words.get('copies')}, lr "
                     f"{words.get('lr')} wd {words.get('wd')}, {words.get('sched')}")
    return out


def curve_finalists(data: RunData) -> list[str]:
    """The candidates whose learning curves are drawn: pick, best, then by rank."""
    fin = data.finalists.sort_values("rank_per_param", kind="stable")
    chosen = [data.pick["candidate"], data.best["candidate"]]
    chosen += [c for c in fin["candidate"] if c not in chosen]
    seen: list[str] = []
    for c in chosen:
        if c not in seen:
            seen.append(c)
    return seen[:MAX_FINALIST_CURVES]


def box_candidates(data: RunData) -> list[str]:
    """Candidates in the fold box plot: all, or the finalists then the best-ranked others.

    At most :data:`MAX_BOXES`; the pick is always among them.
    """
    r = data.ranking
    final = (r["finalist"].astype(bool) if "finalist" in r.columns
             else pd.Series(True, index=r.index))
    order = (r.assign(_later=~final)
             .sort_values(["_later", "rank_per_param"], kind="stable")["candidate"].tolist())
    shown = order[:MAX_BOXES]
    if data.pick["candidate"] not in shown:
        shown[-1] = data.pick["candidate"]
    return shown


def assemble(data: RunData, reused: dict[str, bytes] | None = None) -> Assembled:
    """Render every figure and build every table of the report.

    Figures (names are the PNG file names): ``folds.png``, ``pareto_params.png``,
    ``pareto_macs.png``, ``curves.png``, and for the pick, when its held-out
    predictions are stored, ``confusion.png``; with the data set's images also
    ``confusions_gallery.png`` and ``mistakes.png``. ``reused`` holds PNGs drawn
    from the same data before (:mod:`tinyconv.report.reuse`), taken as they are.
    """
    out = Assembled(notices=list(data.notices), reused=dict(reused or {}))
    ranking = data.ranking
    pick = data.pick
    budgets = data.config.get("budget") or {}
    chance = data.chance
    out.tables["ranking.csv"] = ranking

    folds = fold_scores(ranking, data.units)
    out.tables["folds.csv"] = folds
    shown = box_candidates(data)
    out.boxes_left_out = len(ranking) - len(shown)
    _keep(out, "folds.png", lambda: fold_boxes(folds[folds["candidate"].isin(shown)],
                                               chance=chance, pick=pick["candidate"]))

    fin = data.finalists
    order = {c: str(i) for i, c in enumerate(ranking["candidate"], 1)}   # as the table shows
    for axis in ("params", "macs"):
        _keep(out, f"pareto_{axis}.png",
              lambda axis=axis: pareto_plot(fin, axis, budget=axis_budget(budgets, axis),
                                            chance=chance, names=order))

    out.curve_candidates = curve_finalists(data)
    done = data.units[data.units["status"] == "done"]
    _keep(out, "curves.png", lambda: learning_curves(done, out.curve_candidates, chance=chance,
                                                     pick=pick["candidate"],
                                                     labels=recipe_titles(data.ranking),
                                                     best=data.best["candidate"]))

    out.tables["budgets.csv"] = budget_rows(budgets, pick, data.removed)
    arch = str(pick["arch"]) if "arch" in pick else str(pick["candidate"])
    out.tables["pick_cost.csv"] = pick_cost_table(arch, len(data.classes),
                                                  budgets.get("core"), budgets.get("clock_mhz"))
    structures = structure_table(ranking)
    if structures[["structure", "colour"]].drop_duplicates().shape[0] > 1:
        out.tables["structures.csv"] = structures

    p = data.predictions
    classes = list(data.classes)
    if p is None or p.label.size == 0:
        out.notices.append("The pick's held-out predictions are not in the run store, so its "
                           "confusion matrix and galleries are left out.")
        return out
    counts = confusion_counts(p.label, p.pred, len(classes))
    out.counts = counts
    out.tables["confusion_counts.csv"] = pd.DataFrame(
        counts, index=pd.Index(classes, name="true \\ predicted"), columns=classes)
    out.tables["per_class.csv"] = per_class_table(counts, classes)
    pairs = top_confusions(counts, N_CONFUSIONS)
    out.tables["confusions.csv"] = pd.DataFrame(
        [{"true": classes[t], "predicted": classes[q], "images": c,
          "share_of_true_class": c / max(int(counts[t].sum()), 1)} for t, q, c in pairs],
        columns=["true", "predicted", "images", "share_of_true_class"])
    conf = p.confidence
    wrong = confident_mistakes(p.label, p.pred, conf, N_MISTAKES)
    out.tables["mistakes.csv"] = pd.DataFrame({
        "index": p.index[wrong], "fold": p.fold[wrong],
        "true": [classes[i] for i in p.label[wrong]],
        "predicted": [classes[i] for i in p.pred[wrong]],
        "confidence": conf[wrong],
        "path": [data.paths[i] if data.paths else "" for i in p.index[wrong]],
    })
    _keep(out, "confusion.png", lambda: confusion_figure(counts, classes))
    if data.images is None:
        return out
    examples = confusion_examples(p.label, p.pred, conf, pairs, PER_CONFUSION)
    shown = sorted({int(p.index[q]) for *_, pos in examples for q in pos}
                   | {int(p.index[q]) for q in wrong})
    spec = parse(str(pick["arch"]) if "arch" in pick else str(pick["candidate"])).input
    seen_as = f"{spec.h}x{spec.w} {spec.mode}"
    views: dict = {}

    def seen():  # the pick's view of the images shown, made once if any gallery is drawn
        if "seen" not in views:
            views["seen"] = dict(zip(shown, network_view(data.images[shown], spec))) \
                if shown else None
        return views["seen"]

    _keep(out, "confusions_gallery.png",
          lambda: confusion_gallery(data.images, examples, classes, confidence=conf,
                                    source=p.index, seen=seen(), seen_as=seen_as))
    _keep(out, "mistakes.png", lambda: mistakes_gallery(data.images, wrong, p.label, p.pred,
                                                        conf, classes, source=p.index,
                                                        seen=seen(), seen_as=seen_as))
    return out
