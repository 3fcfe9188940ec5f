"""What the page says, section by section, from a run's data and its rendered parts."""

from __future__ import annotations

import json
import math
from typing import Any

from tinyconv.report.assemble import Assembled
from tinyconv.report.html import (Column, Section, bullet_list, definitions, esc, figure, notice,
                                  num, paragraph, pct, table)
from tinyconv.report.ranking_table import ranking_section
from tinyconv.report.rundata import RunData
from tinyconv.report.shipping import cost_section, device_section, export_section
from tinyconv.report.structure import structure_section
from tinyconv.report.tables import TABLE_FILES
from tinyconv.report.words import code, count

CAUTIONS = (
    "Held-out accuracy measures how well the network does on this data set, split this way; "
    "it is not a promise about the images the device will see in the world. Collect new "
    "images from the real device and check the pick on them before relying on it.",
    "A network can be right for the wrong reason. Confusions (and successes) may be driven "
    "by backgrounds, lighting, the camera, the day of capture or the person who took the "
    "pictures when these leak into the labels. Look at the galleries and ask what the "
    "confused images have in common.",
    "Check the class balance (the per-class counts above) and look for duplicates or "
    "near-duplicates across classes and folds: a copy of an image in two folds makes "
    "held-out accuracy look better than it is. The inspect command lists exact duplicates.",
    "Small differences between candidates are often noise: read the standard errors and "
    "p-values, not the order of the table.",
    "This tool is not for decisions about people (who they are, what they do or what they "
    "deserve). Where your field has its own norms for validation, reporting and review, "
    "those come first.",
)


def folds_section(a: Assembled) -> Section:
    fig = figure(a.figures["folds.png"], "box plots of per-fold accuracy",
                 "Each pair of boxes is one candidate: the dark box its held-out accuracy on "
                 "each fold, the light box its training accuracy. A wide gap between them is "
                 "over-fitting; a tall box is an unstable result.", wide=True)
    lead = "Per-fold accuracy, ordered by parameter count."
    if a.boxes_left_out:
        lead += (f" Only the finalists and the best-ranked others are drawn; "
                 f"{count(a.boxes_left_out, 'candidate')} more are in folds.csv.")
    return Section("folds", "Spread and over-fitting", f'<div class="figs">{fig}</div>',
                   lead=lead)


def pareto_section(a: Assembled) -> Section:
    cap = ("Error bars are one standard error. The shaded band holds the candidates within one "
           "standard error of the best; the stepped line is the front, where nothing is both "
           "smaller and more accurate. The numbers on the front, the pick and the best are "
           "their rows in the ranking table; the key under the plot names them.")
    figs = (figure(a.figures["pareto_params.png"], "accuracy against parameters", cap)
            + figure(a.figures["pareto_macs.png"], "accuracy against MACs",
                     "The same against multiply-accumulates per image (compute per inference)."))
    return Section("tradeoff", "Accuracy against size", f'<div class="figs">{figs}</div>',
                   lead="Finalists only: candidates stopped early were trained for fewer epochs "
                        "and would not compare fairly.")


def curves_section(a: Assembled) -> Section:
    fig = figure(a.figures["curves.png"], "learning curves",
                 "Held-out (dark) and training (light) accuracy by epoch, averaged over folds, "
                 "with the folds' range of held-out accuracy shaded; each rung of the schedule "
                 "(counted from 1, as the search prints them) has its own line style. Each "
                 "panel says whether it is the pick or the best. Curves still rising at "
                 "the end suggest more epochs would help; a training curve pulling away from "
                 "the held-out one is over-fitting.", wide=True)
    names = ", ".join(a.curve_candidates)
    return Section("curves", "Learning curves", f'<div class="figs">{fig}</div>',
                   lead=f"The finalists shown: {names}.")


def pick_section(data: RunData, a: Assembled) -> Section:
    parts = []
    if "confusion.png" in a.figures:
        parts.append('<div class="figs">'
                     + figure(a.figures["confusion.png"], "confusion matrix",
                              "Rows are the true class, columns the predicted class, over all "
                              "held-out folds (each image predicted once, by the network that "
                              "did not train on it).", wide=True) + "</div>")
        pc = a.tables["per_class.csv"]
        per_class = "<div><h3>Per-class precision and recall</h3>" + table(pc, (
            Column("class", "class", esc, numeric=False), Column("images", "images", num),
            Column("predicted as it", "predicted", num), Column("correct", "correct", num),
            Column("precision", "precision", pct), Column("recall", "recall", pct))) + "</div>"
        cf = a.tables["confusions.csv"]
        pairs = "<div><h3>Most frequent confusions</h3>" + (table(cf, (
            Column("true class", "true", esc, numeric=False),
            Column("taken for", "predicted", esc, numeric=False),
            Column("images", "images", num),
            Column("share of the true class", "share_of_true_class", pct)))
            if len(cf) else paragraph("No held-out image was misclassified.")) + "</div>"
        parts.append(f'<div class="two">{per_class}{pairs}</div>')
    if "confusions_gallery.png" in a.figures:
        parts.append("<h3>What it confuses</h3>" + '<div class="figs">' + figure(
            a.figures["confusions_gallery.png"], "gallery of confused images",
            "Real held-out images from the most frequent confusions, each beside what the "
            "pick saw of it (its input size and colour mode), with the probability the pick "
            "gave its (wrong) answer. Look for what they share: background, lighting, "
            "framing, the object's size; and whether the mark survives the shrinking.",
            wide=True) + "</div>")
        parts.append("<h3>Its most confident mistakes</h3>" + '<div class="figs">' + figure(
            a.figures["mistakes.png"], "most confident mistakes",
            "Wrong answers given with the highest probability: often label errors in the "
            "data, or a cue the network learned that is not the object.", wide=True) + "</div>")
    parts += [notice(n) for n in a.notices]
    return Section("pick", "The pick up close", "".join(parts),
                   lead=f"{data.pick['candidate']} at its ranked rung, every image scored by the "
                        "fold model that held it out.")


def budget_summary(data: RunData) -> str:
    """One sentence: how many candidates the space had and what the budgets removed."""
    cands = data.candidates
    if cands is None or cands.empty:
        return ""
    n = len(cands)
    within = int(cands["within_budget"].astype(bool).sum())
    over = ", ".join(f"{k}: {v}" for k, v in data.removed.items() if v)
    text = (f"The space held {count(n, 'candidate')}; {within} fit every budget"
            + (f" (removed, per budget: {over}; a candidate over two budgets counts twice)"
               if over else ""))
    if "scheduled" in cands.columns:
        scheduled = int(cands["scheduled"].astype(bool).sum())
        if scheduled != within:
            text += f", and {scheduled} of those were taken into the search"
    text += (f". {count(len(data.ranking), 'candidate')} finished every fold of a rung "
             "and are ranked.")
    if data.outcome and data.outcome.get("state"):
        text += (f" The last search session ended: {data.outcome['state']} (details under "
                 "search outcome below).")
    return paragraph(text)


def units_summary(data: RunData) -> str:
    """How the work units went: counts by status, CPU time, and the ones that did not finish."""
    u = data.units
    if u is None or u.empty:
        return ""
    counts = u["status"].value_counts()
    parts = ", ".join(f"{int(n)} {esc(str(k))}" for k, n in counts.items())
    cpu = float(u["cpu_s"].sum()) if "cpu_s" in u.columns else float("nan")
    spent = (f"{cpu:.0f} CPU seconds" if cpu < 120 else f"{cpu / 60:.1f} CPU minutes")
    html = paragraph(f"Work units (one candidate, one fold, one rung): {parts}"
                     + (f"; {spent} in all." if math.isfinite(cpu) else "."))
    bad = u[u["status"] != "done"]
    if len(bad):
        html += "<h3>Units that did not finish</h3>" + table(bad.head(50), (
            Column("candidate", "candidate", code, numeric=False),
            Column("fold", "fold", num), Column("rung", "rung", num),
            Column("epochs", "epochs", num),
            Column("status", "status", esc, numeric=False),
            Column("why", "message", esc, numeric=False)))
        if len(bad) > 50:
            html += paragraph(f"and {len(bad) - 50} more.")
    return html


def budget_section(data: RunData, a: Assembled) -> Section:
    b = a.tables["budgets.csv"]
    if b.empty:
        body = paragraph("The run set no device budgets.")
    else:
        def share(v: object) -> str:
            return pct(v, 0)

        def within(v: object) -> str:
            return "\u2013" if v is None or (isinstance(v, float) and math.isnan(v)) else (
                "yes" if v else "<strong>no</strong>")
        shown = b.copy()
        shown["_limit"] = [num(v, 0 if u in ("count", "MACs") else 1)
                           for v, u in zip(b["limit"], b["unit"])]
        shown["_pick"] = [num(v, 0 if u in ("count", "MACs") else 1)
                          for v, u in zip(b["pick"], b["unit"])]
        body = table(shown, (Column("budget", "budget", code, numeric=False),
                             Column("limits", "limits", esc, numeric=False),
                             Column("limit", "_limit", esc), Column("pick", "_pick", esc),
                             Column("unit", "unit", esc, numeric=False),
                             Column("share used", "share", share),
                             Column("pick within", "within", within, numeric=False),
                             Column("candidates removed", "removed", num)))
    body += budget_summary(data)
    body += units_summary(data)
    items = list(data.config.items())
    if data.outcome:
        items.append(("search outcome", _config_value(data.outcome)))
    cfg = definitions((k, _config_value(v) if k != "search outcome" else v) for k, v in items)
    files = "".join(f"<li><code>{esc(n)}</code>: {esc(d)}</li>" for n, d in TABLE_FILES.items()
                    if n in a.tables)
    return Section("budgets", "Budgets and configuration",
                   body + "<h3>Run configuration</h3>" + cfg
                   + "<h3>Tables written beside this page</h3><ul>" + files + "</ul>",
                   lead="Every candidate was costed before training; only those within all "
                        "budgets were trained.")


def _config_value(v: Any) -> str:
    """A configuration value as markup: texts in code, lists inline, tables as key = value."""
    if v is None:
        return "\u2013"
    if isinstance(v, str):
        return f"<pre>{esc(v.rstrip())}</pre>" if "\n" in v else code(v)
    if isinstance(v, (list, tuple)) and all(not isinstance(x, (dict, list)) for x in v):
        return esc(", ".join(str(x) for x in v))
    if isinstance(v, dict):
        if not v:
            return "\u2013"
        return "<pre>" + esc("\n".join(f"{k} = {_plain(x)}" for k, x in v.items())) + "</pre>"
    return f"<pre>{esc(json.dumps(v, indent=1, default=str))}</pre>"


def _plain(x: Any) -> str:
    """One value in a key = value list: no limit for None, floats to 4 significant digits."""
    if x is None:
        return "no limit"
    if isinstance(x, float):
        return f"{x:.4g}"
    if isinstance(x, (list, tuple)):
        return ", ".join(_plain(i) for i in x) if x else "none"
    return str(x)


def cautions_section() -> Section:
    return Section("cautions", "Before you trust it",
                   f'<div class="cautions">{bullet_list(CAUTIONS)}</div>')


def all_sections(data: RunData, a: Assembled) -> list[Section]:
    """The page's sections in order."""
    shipping = [cost_section(data, a.tables["pick_cost.csv"]), export_section(data),
                device_section(data)]
    structure = structure_section(data.ranking)
    return [ranking_section(data), folds_section(a), pareto_section(a),
            *((structure,) if structure else ()), curves_section(a),
            pick_section(data, a), *(s for s in shipping if s is not None),
            budget_section(data, a), cautions_section()]
