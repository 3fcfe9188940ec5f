"""The card under the header: the pick in words and its headline figures."""

from __future__ import annotations

import math

from tinyconv import fmt
from tinyconv.report.html import esc, num, paragraph, pct, pvalue, tiles
from tinyconv.report.rundata import RunData
from tinyconv.report.words import acc_pm

def why_pick(data: RunData) -> str:
    """One plain paragraph on why the pick was picked (the one-SE rule)."""
    pick, best = data.pick, data.best
    fin = data.finalists
    n_within = int(fin["within_1se"].astype(bool).sum())
    threshold = float(best["acc_mean"]) - float(best["acc_se"])
    head = (f"The one-standard-error rule picks the candidate with the fewest parameters among "
            f"those whose mean held-out accuracy is within one standard error of the best. The "
            f"best, {best['candidate']}, scores {acc_pm(best)}, so the bar is "
            f"{pct(threshold)}; {n_within} of the {len(fin)} finalists clear it")
    if pick["candidate"] == best["candidate"]:
        return head + (f", and the best is itself the smallest of them "
                       f"({num(pick['params'])} parameters).")
    p = pvalue(pick.get("p_vs_best", math.nan)).replace("&lt;", "<")
    return head + (f". The pick, {pick['candidate']}, has {num(pick['params'])} parameters "
                   f"against the best's {num(best['params'])} "
                   f"({float(best['params']) / max(float(pick['params']), 1):.1f} times fewer) and "
                   f"scores {acc_pm(pick)}, {100 * (best['acc_mean'] - pick['acc_mean']):.1f} "
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
        out.append(f"Its held-out accuracy ({fmt.accuracy(acc, se)}) is within two standard "
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
