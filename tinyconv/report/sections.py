"""What the page says, section by section, from a run's data and its rendered parts."""

from __future__ import annotations

import json
import math
from typing import Any

import pandas as pd

from tinyconv.report.assemble import Assembled
from tinyconv.report.html import (Column, Section, bullet_list, definitions, esc, figure, notice,
                                  num, paragraph, pct, pvalue, table, tiles)
from tinyconv.report.rundata import RunData
from tinyconv.report.structure import structure_section
from tinyconv.report.tables import TABLE_FILES

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


def _count(n: int, noun: str) -> str:
    """'1 candidate', '3 candidates'."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"


def _code(v: object) -> str:
    return f"<code>{esc(str(v))}</code>"


def _acc_pm(row: pd.Series) -> str:
    return f"{pct(row['acc_mean'])} \u00b1 {pct(row['acc_se'])}"


MS_COLUMN = Column("ms", "ms", lambda v: num(v, 2),
                   title="milliseconds per image on the run's device (cost model)")
RANKING_COLUMNS = (
    Column("rank per kparam", "rank_per_param", num,
           title="rank by accuracy over chance per 1000 parameters"),
    Column("candidate", "candidate", _code, numeric=False),
    Column("params", "params", num),
    Column("MACs", "macs", num, title="multiply-accumulates per image"),
    Column("peak KB", "peak_kb", lambda v: num(v, 1), title="peak activation memory, int8"),
    Column("flash KB", "flash_kb", lambda v: num(v, 1), title="int8 weights and tables"),
    Column("epochs", "epochs", num),
    Column("held-out acc", "_acc", esc, title="mean over folds \u00b1 standard error"),
    Column("train acc", "train_acc_mean", pct),
    Column("gap", "gap", lambda v: pct(v, 1), title="training minus held-out accuracy"),
    Column("acc / kparam", "acc_per_kparam", lambda v: num(v, 3),
           title="(accuracy - 1/K) per 1000 parameters"),
    Column("p vs best", "p_vs_best", pvalue, title="corrected resampled t-test against the best"),
    Column("rank by accuracy", "rank_accuracy", num, title="rank by mean held-out accuracy"),
)
# Shown when the search scored the int8 form (search --int8).
INT8_COLUMN = Column("int8 acc", "int8_acc_mean", pct,
                     title="mean held-out accuracy of the int8 quantised network")


def why_pick(data: RunData) -> str:
    """One plain paragraph on why the pick was picked (the one-SE rule)."""
    pick, best = data.pick, data.best
    fin = data.finalists
    n_within = int(fin["within_1se"].astype(bool).sum())
    threshold = float(best["acc_mean"]) - float(best["acc_se"])
    head = (f"The one-standard-error rule picks the candidate with the fewest parameters among "
            f"those whose mean held-out accuracy is within one standard error of the best. The "
            f"best, {best['candidate']}, scores {_acc_pm(best)}, so the bar is "
            f"{pct(threshold)}; {n_within} of the {len(fin)} finalists clear it")
    if pick["candidate"] == best["candidate"]:
        return head + (f", and the best is itself the smallest of them "
                       f"({num(pick['params'])} parameters).")
    p = pvalue(pick.get("p_vs_best", math.nan)).replace("&lt;", "<")
    return head + (f". The pick, {pick['candidate']}, has {num(pick['params'])} parameters "
                   f"against the best's {num(best['params'])} "
                   f"({float(best['params']) / max(float(pick['params']), 1):.1f} times fewer) and "
                   f"scores {_acc_pm(pick)}, {100 * (best['acc_mean'] - pick['acc_mean']):.1f} "
                   f"points below the best (corrected paired t-test p = {p}).")


# A training accuracy this far above held-out accuracy is worth a warning (common
# practice: a gap of several points already means the network memorises).
GAP_WARN = 0.10


def pick_flags(data: RunData) -> list[str]:
    """Plain warnings about the pick: near chance, or over-fitting."""
    pick = data.pick
    out = []
    acc, se, chance = float(pick["acc_mean"]), float(pick["acc_se"]), data.chance
    if acc - 2 * se <= chance:
        out.append(f"Its held-out accuracy ({pct(acc)} \u00b1 {pct(se)}) is within two standard "
                   f"errors of chance ({pct(chance)}): no candidate learned much. Try more "
                   "images, more epochs or another space before shipping anything.")
    gap = float(pick["gap"])
    if gap > GAP_WARN:
        out.append(f"It over-fits: training accuracy is {100 * gap:.0f} points above held-out "
                   "accuracy. More images, regularisation (weight decay, "
                   "dropout) or a smaller network may generalise better.")
    return out


def decision_panel(data: RunData) -> str:
    """The panel under the header: the pick, in words and headline numbers."""
    pick = data.pick
    t = tiles((
        ("held-out accuracy", pct(pick["acc_mean"]), f"\u00b1 {pct(pick['acc_se'])} SE over "
         f"{int(pick['folds'])} folds"),
        ("parameters", num(pick["params"]), f"{num(pick['macs'])} MACs per image"),
        ("flash", f"{num(pick['flash_kb'], 1)} KB", "int8 weights and tables"),
        ("peak memory", f"{num(pick['peak_kb'], 1)} KB", "int8 activations"),
        *((("time", f"{num(pick['ms'], 2)} ms", "per image on the device (cost model)"),)
          if "ms" in pick and pick["ms"] == pick["ms"] else ()),
        ("over-fitting gap", pct(pick["gap"]), f"training {pct(pick['train_acc_mean'])}"),
    ))
    return ('<div class="decision"><div><h2>The pick</h2>'
            f'<p class="arch">{esc(str(pick["candidate"]))}</p>{paragraph(why_pick(data))}'
            + "".join(f'<p class="flag">{esc(f)}</p>' for f in pick_flags(data))
            + f"</div><div>{t}</div></div>")


def ranking_section(data: RunData) -> Section:
    frame = data.ranking.copy()
    frame["_acc"] = [_acc_pm(r) for _, r in frame.iterrows()]
    columns = RANKING_COLUMNS
    if "int8_acc_mean" in frame and frame["int8_acc_mean"].notna().any():
        columns = columns[:8] + (INT8_COLUMN,) + columns[8:]
    if "ms" in frame and frame["ms"].notna().any():  # the run names a device
        columns = columns[:6] + (MS_COLUMN,) + columns[6:]
    body = table(frame, columns, highlight=list(frame["pick"].astype(bool)), css="ranking")
    n_lower = int((~data.ranking.get("finalist", pd.Series(True, index=frame.index))
                   .astype(bool)).sum())
    extra = []
    if n_lower:
        extra.append(f"{_count(n_lower, 'candidate')} stopped at a lower rung (fewer epochs): "
                     "listed after the finalists, taking no part in the pick.")
    extra.append(f"Chance accuracy with {len(data.classes)} classes is {pct(data.chance)}; "
                 "accuracy per thousand parameters counts only the part above chance.")
    return Section("ranking", "Ranking", body + "".join(paragraph(t) for t in extra),
                   lead="Mean held-out accuracy over the cross-validation folds with its "
                        "standard error, the size and cost of each candidate, and how it "
                        "compares with the best. The highlighted row is the pick.")


def folds_section(a: Assembled) -> Section:
    fig = figure(a.figures["folds.png"], "box plots of per-fold accuracy",
                 "Each pair of boxes is one candidate: the dark box its held-out accuracy on "
                 "each fold, the light box its training accuracy. A wide gap between them is "
                 "over-fitting; a tall box is an unstable result.", wide=True)
    lead = "Per-fold accuracy, ordered by parameter count."
    if a.boxes_left_out:
        lead += (f" Only the finalists and the best-ranked others are drawn; "
                 f"{_count(a.boxes_left_out, 'candidate')} more are in folds.csv.")
    return Section("folds", "Spread and over-fitting", f'<div class="figs">{fig}</div>',
                   lead=lead)


def pareto_section(a: Assembled) -> Section:
    cap = ("Error bars are one standard error. The shaded band holds the candidates within one "
           "standard error of the best; the stepped line is the front, where nothing is both "
           "smaller and more accurate.")
    figs = (figure(a.figures["pareto_params.png"], "accuracy against parameters", cap)
            + figure(a.figures["pareto_macs.png"], "accuracy against MACs",
                     "The same against multiply-accumulates per image (compute per inference)."))
    return Section("tradeoff", "Accuracy against size", f'<div class="figs">{figs}</div>',
                   lead="Finalists only: candidates stopped early were trained for fewer epochs "
                        "and would not compare fairly.")


def curves_section(a: Assembled) -> Section:
    fig = figure(a.figures["curves.png"], "learning curves",
                 "Held-out (dark) and training (light) accuracy by epoch, averaged over folds; "
                 "each rung of the schedule has its own line style. Curves still rising at "
                 "the end suggest more epochs would help; a training curve pulling away from "
                 "the held-out one is over-fitting.", wide=True)
    names = ", ".join(a.curve_candidates)
    return Section("curves", "Learning curves", f'<div class="figs">{fig}</div>',
                   lead=f"The finalists shown: {names}.")


def pick_section(data: RunData, a: Assembled) -> Section:
    parts = []
    if "confusion.png" in a.figures:
        parts.append(f'<div class="figs">'
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
            "Real held-out images from the most frequent confusions, with the probability "
            "the pick gave its (wrong) answer. Look for what they share: background, "
            "lighting, framing, the object's size.", wide=True) + "</div>")
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
    text = (f"The space held {_count(n, 'candidate')}; {within} fit every budget"
            + (f" (removed, per budget: {over}; a candidate over two budgets counts twice)"
               if over else ""))
    if "scheduled" in cands.columns:
        scheduled = int(cands["scheduled"].astype(bool).sum())
        if scheduled != within:
            text += f", and {scheduled} of those were taken into the search"
    text += (f". {_count(len(data.ranking), 'candidate')} finished every fold of a rung "
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
            Column("candidate", "candidate", _code, numeric=False),
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
        body = table(shown, (Column("budget", "budget", _code, numeric=False),
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
        return f"<pre>{esc(v.rstrip())}</pre>" if "\n" in v else _code(v)
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


def device_section(data: RunData) -> Section | None:
    """The exported pick measured on an emulated core (``export/device.json``)."""
    d = data.device
    if not d:
        return None
    est = d.get("estimate", {})

    def row(what: str, measured: object, model: object, digits: int = 0) -> tuple:
        return (what, num(measured, digits), num(model, digits))
    rows = [row("instructions per image", d["instructions"], est.get("instructions")),
            row("instructions per MAC", d["instructions_per_mac"],
                (est.get("instructions") or 0) / max(d.get("macs") or 1, 1), 2),
            row(f"ms per image at {num(d['clock_mhz'])} MHz", d["ms_at_clock"],
                est.get("ms_at_clock"), 2),
            row("flash bytes (code + constants)", d["flash_bytes"], est.get("flash_bytes")),
            row("RAM bytes (activations + stack)", d["ram_bytes"], est.get("ram_bytes"))]
    body = ("<table><thead><tr><th>figure</th><th>measured</th><th>cost model</th></tr>"
            "</thead><tbody>" + "".join(f"<tr><td>{esc(a)}</td><td>{b}</td><td>{c}</td></tr>"
                                        for a, b, c in rows) + "</tbody></table>")
    exact = ("every logit of every image equals the NumPy integer reference (bit-exact)"
             if d["bit_exact"] else f"{d['mismatched_images']} images differ from the "
             "NumPy integer reference: do not ship this build")
    body += paragraph(
        f"The exported int8 C of {d['arch']}, cross-compiled with arm-none-eabi-gcc "
        f"{d.get('compiler_opt', '')} for {d['core']} and run under QEMU ({d['board']}, "
        f"exact instruction counting) on {d['images']} images held out of the calibration: "
        f"{exact}. The time assumes {d['cpi']:g} cycles per instruction (QEMU counts "
        "instructions, not cycles); measure on the part before relying on it.")
    return Section("device", "On the device", body)


def cautions_section() -> Section:
    return Section("cautions", "Before you trust it",
                   f'<div class="cautions">{bullet_list(CAUTIONS)}</div>')


def all_sections(data: RunData, a: Assembled) -> list[Section]:
    """The page's sections in order."""
    device = device_section(data)
    structure = structure_section(data.ranking)
    return [ranking_section(data), folds_section(a), pareto_section(a),
            *((structure,) if structure else ()), curves_section(a),
            pick_section(data, a), *((device,) if device else ()), budget_section(data, a),
            cautions_section()]
