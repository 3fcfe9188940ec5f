"""The one-screen account of a search: what ran, the ranking table, the pick.

The table keeps the ranking's order (:mod:`search.rank`): the pick first,
then the other candidates within one standard error of the best, then the
rest, then those stopped at a lower rung, each group under a heading that
says what it is. Headers are words; figures use :mod:`tinyconv.fmt`.
"""

from __future__ import annotations

import math
import textwrap
from typing import Sequence

import pandas as pd

from search.ranking import Ranking
from tinyconv import fmt

STATE_TEXT = {"complete": "the whole plan ran",
              "budget_cpu": "the CPU budget ran out; what finished is ranked",
              "budget_epochs": "the epoch budget ran out; what finished is ranked",
              "interrupted": "interrupted"}

#: Heading of each row group of the ranking (search.rank.GROUPS).
GROUP_HEADINGS = {
    "pick": "the pick: the fewest parameters within one standard error of the best",
    "within_one_se": "also within one standard error of the best",
    "outside_one_se": "further from the best",
    "stopped_early": "stopped at a lower rung: measured after fewer epochs, so not "
                     "compared with the rows above and never picked",
}
PICK_MARK = "\u2605"   # a star before the pick's row
WRAP = 92             # the width prose lines are wrapped at


def _nan(v: object) -> bool:
    return isinstance(v, float) and math.isnan(v)


def _columns(table: pd.DataFrame) -> list[tuple[str, str, object]]:
    """(header line 1, header line 2, cell function) of each numeric column."""
    cols: list[tuple[str, str, object]] = [
        ("held-out", "accuracy", lambda r: fmt.accuracy(r.acc_mean, r.acc_se)),
        ("training", "accuracy", lambda r: fmt.percent(r.train_acc_mean)),
        ("gain per", "1k params", lambda r: f"{100 * r.acc_per_kparam:.2f}"),
        ("", "parameters", lambda r: fmt.count(r.params)),
        ("MACs", "per image", lambda r: fmt.count(r.macs)),
        ("peak RAM", "KB", lambda r: f"{r.peak_kb:.1f}"),
        ("flash", "KB", lambda r: f"{r.flash_kb:.1f}"),
    ]
    if "ms" in table and table["ms"].notna().any():
        cols.append(("time", "ms", lambda r: fmt.MISSING if _nan(r.ms) else f"{r.ms:.2f}"))
    if "int8_acc_mean" in table and table["int8_acc_mean"].notna().any():
        cols.append(("int8", "accuracy", lambda r: fmt.percent(r.int8_acc_mean)))
    cols += [("", "epochs", lambda r: str(int(r.epochs))),
             ("p against", "the best", lambda r: fmt.MISSING if _nan(r.p_vs_best)
              else "<0.001" if r.p_vs_best < 0.001 else f"{r.p_vs_best:.3f}")]
    return cols


def legend(by: str, simplest_by: str = "params") -> str:
    """What the rows and the columns of the terminal table are."""
    from search.rank import SIMPLEST_WORDS
    order = ("accuracy gained over chance per 1,000 parameters" if by != "accuracy"
             else "mean held-out accuracy")
    return (f"Ranking: the pick first ({SIMPLEST_WORDS[simplest_by]} within one standard "
            f"error of the best), then the other candidates within one standard error "
            f"of the best, then the rest; within each group by {order}. Gain per 1k params: "
            "percentage points above chance per 1,000 parameters. p: corrected t-test "
            "against the best.")


#: Columns left out, in this order, when the table is wider than the terminal.
NARROW_DROPS = ("time", "MACs", "training", "flash", "peak RAM", "gain per", "int8")


def ranking_table(table: pd.DataFrame, top: int = 12, width: int | None = None) -> list[str]:
    """The first ``top`` rows of the ranking as text, under group headings.

    With a terminal ``width``, columns of :data:`NARROW_DROPS` are left out (and
    said to be) until the table fits; held-out accuracy, parameters, epochs and
    the p-value always stay.
    """
    shown = table.head(top)
    cols = _columns(table)
    name_w = max([len("candidate")] + [len(c) + 2 for c in shown["candidate"]])

    def measure(cols: list) -> tuple[list[list[str]], list[int], int]:
        cells = [[str(f(r)) for _, _, f in cols] for r in shown.itertuples()]
        widths = [max([len(a), len(b)] + [len(c[i]) for c in cells])
                  for i, (a, b, _) in enumerate(cols)]
        return cells, widths, 2 + name_w + 2 + sum(widths) + 2 * (len(widths) - 1)

    cells, widths, total = measure(cols)
    dropped = []
    for name in NARROW_DROPS:
        if width is None or total <= width:
            break
        if any(a == name for a, _, _ in cols):
            cols = [c for c in cols if c[0] != name]
            dropped.append(" ".join(x for x in next(
                (a, b) for a, b, _ in _columns(table) if a == name) if x))
            cells, widths, total = measure(cols)

    def line(first: str, parts: Sequence[str]) -> str:
        return ("  " + first.ljust(name_w + 2)
                + "  ".join(p.rjust(w) for p, w in zip(parts, widths))).rstrip()

    lines = [line("", [a for a, _, _ in cols]), line("  candidate", [b for _, b, _ in cols])]
    group = None
    for r, row_cells in zip(shown.itertuples(), cells):
        g = getattr(r, "group", None)
        if g != group:
            group = g
            lines += textwrap.wrap(GROUP_HEADINGS.get(str(g), str(g)),
                                   min(WRAP, width or WRAP))
        mark = f"{PICK_MARK} " if r.pick else "  "
        lines.append(line(mark + r.candidate, row_cells))
    if dropped:
        lines += textwrap.wrap(f"(left out to fit the terminal: {', '.join(dropped)}; "
                               "ranking.csv has every column)", min(WRAP, width or WRAP))
    return lines


def summary_lines(summary, top: int = 12, width: int | None = None) -> list[str]:
    """The one-screen summary of a finished (or stopped) search (``width``: the
    terminal's, to fit the ranking table in; None for no limit)."""
    o, t = summary.outcome, summary.table
    over = ", ".join(f"{k} {v}" for k, v in summary.removed.items() if v)
    lines = [f"candidates: {summary.n_candidates} in the space, {summary.n_within} within "
             f"budget{f' (over {over})' if over else ''}, {summary.n_searched} searched",
             f"units: {o.units_run} run now, {o.units_stored} stored ({o.diverged} diverged, "
             f"{o.failed} failed, {o.retried} retried after a lost worker); training CPU "
             f"{_duration(o.cpu_s)}, {o.epochs:,} epochs in all; {summary.workers}",
             f"end: {STATE_TEXT.get(o.state, o.state)}"]
    if getattr(summary, "space_source", "") == "builtin:general":
        lines.insert(0, f"space: none given, so the {summary.space_description or 'general space'}"
                        " (tinyconv space DATA --write FILE writes it out to edit)")
    lines += [f"note: {n}" for n in o.notes]
    if t.empty:
        lines.append("no candidate has finished every fold of a rung yet: nothing to rank")
        return lines
    wrap = min(WRAP, width or WRAP)
    simplest = getattr(summary, "simplest_by", "params")
    lines += ["", *textwrap.wrap(legend(getattr(summary, "rank_by", "per_param"), simplest),
                                 wrap)]
    lines += ranking_table(t, top, width)
    if "recipe" in t and t["recipe"].nunique() == 1 and t["recipe"].iloc[0]:
        lines.append(f"recipe of every candidate: {t['recipe'].iloc[0]}")
    if len(t) > top:
        lines.append(f"  ... {len(t) - top} more rows in {summary.ranking_path}")
    ranking = Ranking(t)
    # the best of highest mean, ties to fewer parameters, then the table's order
    pick, best = ranking.pick, ranking.best_least("params")
    lines += ["", f"pick: {pick.candidate}  held-out accuracy "
                  f"{fmt.accuracy(pick.acc_mean, pick.acc_se)} over {int(pick.folds)} folds, "
                  f"{fmt.count(pick.params)} parameters, {pick.peak_kb:.1f} KB RAM, "
                  f"{pick.flash_kb:.1f} KB flash"
                  + (f", {pick.ms:.2f} ms per image (model)" if pick.ms == pick.ms else ""),
              f"best: {best.candidate}  {fmt.accuracy(best.acc_mean, best.acc_se)}, "
              f"{fmt.count(best.params)} parameters"]
    if "int8_acc_mean" in t and t["int8_acc_mean"].notna().any():
        lines.append(f"int8: the pick scores {fmt.percent(pick.int8_acc_mean)} held-out as "
                     f"int8 ({fmt.points(pick.int8_drop)} lost to quantisation); column "
                     "int8_acc_mean of the ranking")
    lines.append(f"ranking: {summary.ranking_path}")
    return lines


def _duration(seconds: float) -> str:
    from search.config import format_duration
    return format_duration(seconds)
