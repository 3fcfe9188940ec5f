"""The card under the header: the pick in words and its headline figures."""

from __future__ import annotations

import math

from tinyconv import fmt
from tinyconv.report.html import esc, num, paragraph, pct, pvalue, tiles
from tinyconv.report.rundata import RunData
from tinyconv.report.words import acc_pm


def fewer_parameters(pick: float, best: float) -> str:
    """How much smaller the pick is than the best, in the plainest words that fit.

    ``'4.5 times fewer'`` from a factor of 2 on, ``'3,000 fewer, 25% less'`` below
    it, ``'the same number'`` when equal.
    """
    pick, best = float(pick), float(best)
    if pick >= best:
        return "the same number" if pick == best else f"{fmt.count(pick - best)} more"
    if best >= 2 * pick:
        return f"{best / max(pick, 1):.1f} times fewer"
    return f"{fmt.count(best - pick)} fewer, {100 * (1 - pick / best):.0f}% less"


def against_budget(value: float, budget: object, unit: str = "", digits: int = 0) -> str:
    """``'38% of the 50,000 budget'``, or ``'no budget set'``."""
    try:
        limit = float(budget)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        return "no budget set"
    if not (math.isfinite(limit) and limit > 0):
        return "no budget set"
    return f"{100 * float(value) / limit:.0f}% of the {num(limit, digits)}{unit} budget"


#: --simplest-by name -> (ranking column, how to show a value, the superlative).
MEASURES = {"params": ("params", lambda v: f"{num(v)} parameters", "smallest"),
            "macs": ("macs", lambda v: f"{num(v)} MACs per image", "cheapest"),
            "ram": ("peak_kb", lambda v: f"{num(v, 1)} KB of peak activation memory", "leanest"),
            "flash": ("flash_kb", lambda v: f"{num(v, 1)} KB of flash", "smallest"),
            "ms": ("ms", lambda v: f"{num(v, 2)} ms per image (cost model)", "fastest")}


def simplest_by(data: RunData) -> str:
    """What the run's one-SE pick minimised (``params`` for runs that did not say)."""
    return str(data.config.get("simplest_by") or "params")


def _less(measure: str, pick: float, best: float) -> str:
    """How much less of the measure the pick needs than the best, in plain words."""
    if measure == "params":
        return fewer_parameters(pick, best)
    pick, best = float(pick), float(best)
    if not (pick == pick and best == best) or pick >= best:
        return "no less"
    if best >= 2 * pick > 0:
        return f"{best / pick:.1f} times less"
    return f"{100 * (1 - pick / best):.0f}% less"


def why_pick(data: RunData) -> str:
    """One plain paragraph on why the pick was picked (the one-SE rule, by the run's measure)."""
    from search.rank import SIMPLEST_WORDS

    pick, best = data.pick, data.best
    fin = data.finalists
    n_within = int(fin["within_1se"].astype(bool).sum())
    threshold = float(best["acc_mean"]) - float(best["acc_se"])
    measure = simplest_by(data)
    column, show, most = MEASURES[measure]
    head = (f"The one-standard-error rule picks the candidate with {SIMPLEST_WORDS[measure]} "
            f"among those whose mean held-out accuracy is within one standard error of the "
            f"best (this run's --simplest-by {measure}). The best, {best['candidate']}, "
            f"scores {acc_pm(best)}, so the bar is {pct(threshold)}; {n_within} of the "
            f"{len(fin)} finalists clear it")
    if pick["candidate"] == best["candidate"]:
        return head + f", and the best is itself the {most} of them ({show(pick[column])})."
    p = pvalue(pick.get("p_vs_best", math.nan)).replace("&lt;", "<")
    return head + (f". The pick, {pick['candidate']}, has {show(pick[column])} against the "
                   f"best's {show(best[column])} ({_less(measure, pick[column], best[column])})"
                   f" and scores {acc_pm(pick)}, "
                   f"{100 * (best['acc_mean'] - pick['acc_mean']):.1f} points below the best "
                   f"(corrected paired t-test p = {p}).")


# A training accuracy this far above held-out accuracy is worth a warning (common
# practice: a gap of several points already means the network memorises).
GAP_WARN = 0.10


def pick_flags(data: RunData) -> list[str]:
    """Plain warnings about the pick: near chance, or over-fitting."""
    pick = data.pick
    out = []
    acc, se, chance = float(pick["acc_mean"]), float(pick["acc_se"]), data.chance
    if acc - 2 * se <= chance:
        out.append(f"Its held-out accuracy ({fmt.accuracy(acc, se)}) is within two standard "
                   f"errors of chance ({pct(chance)}): no candidate learned much. Try more "
                   "images, more epochs or another space before shipping anything.")
    gap = float(pick["gap"])
    if gap > GAP_WARN:
        out.append(f"It over-fits: training accuracy is {100 * gap:.0f} points above held-out "
                   "accuracy. More images, regularisation (weight decay, "
                   "dropout), augmentation that keeps the labels true (a [training] "
                   "augment choice) or a smaller network may generalise better.")
    return out


def decision_panel(data: RunData) -> str:
    """The panel under the header: the pick, in words and headline numbers."""
    pick = data.pick
    b = data.config.get("budget") or {}
    timed = "ms" in pick and pick["ms"] == pick["ms"]
    t = tiles((
        ("held-out accuracy", pct(pick["acc_mean"]), f"\u00b1 {pct(pick['acc_se'])} SE over "
         f"{int(pick['folds'])} folds"),
        ("parameters", num(pick["params"]), against_budget(pick["params"], b.get("max_params"))),
        ("MACs per image", num(pick["macs"]), against_budget(pick["macs"], b.get("max_macs"))),
        ("flash (int8)", f"{num(pick['flash_kb'], 1)} KB",
         against_budget(pick["flash_kb"], b.get("max_flash_kb"), " KB")),
        ("peak activations (int8)", f"{num(pick['peak_kb'], 1)} KB",
         against_budget(pick["peak_kb"], b.get("max_peak_kb"), " KB")),
        *((("time per image (model)", f"{num(pick['ms'], 2)} ms",
            against_budget(pick["ms"], b.get("max_ms"), " ms", 1)),) if timed else ()),
        ("over-fitting gap", pct(pick["gap"]), f"training {pct(pick['train_acc_mean'])}"),
    ))
    caution = ('<p class="tocautions">Before shipping it, read <a href="#cautions">the '
               "cautions</a>: accuracy on this data is not accuracy in the world, and what "
               "the camera and the backgrounds leak into the labels can look like skill.</p>")
    arch = pick["arch"] if "arch" in pick else pick["candidate"]
    recipe = (paragraph(f"Trained with the recipe {pick['recipe']}.")
              if "recipe" in pick and pick["recipe"] else "")
    return ('<div class="decision"><div><h2>The pick</h2>'
            f'<p class="arch">{esc(str(arch))}</p>{recipe}{paragraph(why_pick(data))}'
            + "".join(f'<p class="flag">{esc(f)}</p>' for f in pick_flags(data))
            + caution + f"</div><div>{t}</div></div>")
