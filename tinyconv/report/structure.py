"""Which structure won at which size: plain chains against residual blocks and colour modes.

Each ranked candidate gets a structure from its text (:func:`structure_of`: a
plain chain of layers, inverted bottlenecks, plain residual pairs) and its
input's colour mode (``rgb``, ``rgb+hsv``, ...), and a size class by its
parameters (:data:`SIZE_EDGES`). Within a size class the candidates trained
longest are compared (a successive-halving search stops others earlier, and
accuracies after fewer epochs do not compare fairly); for each structure and
colour the best of them by mean held-out accuracy is kept, with its standard
error and the range over folds, and the best of those wins the class. A win
by less than the runner-up's standard error is said to be within the noise.
"""

from __future__ import annotations

import math

import pandas as pd

from tinyconv.arch import ArchError, Block, Conv, Depthwise, parse
from tinyconv.report.html import Column, Section, esc, num, paragraph, pct, table

#: upper edges of the size classes, in parameters (the last class is open)
SIZE_EDGES = (1_000, 4_000, 16_000, 64_000)
COLUMNS = ("size", "structure", "colour", "candidate", "params", "epochs", "folds",
           "acc_mean", "acc_se", "acc_min", "acc_max", "compared", "won", "lead_se")


def structure_of(text: str) -> str:
    """``chain``, ``inverted bottleneck``, ``residual pair`` or ``mixed blocks``.

    A block is an inverted bottleneck when it holds a depthwise convolution
    between a widening and a narrowing 1x1 convolution, a residual pair
    otherwise.
    """
    kinds = set()
    for layer in parse(text).layers:
        if not isinstance(layer, Block):
            continue
        convs = [x for x in layer.layers if isinstance(x, (Conv, Depthwise))]
        bottleneck = (len(convs) >= 3 and isinstance(convs[0], Conv) and convs[0].kernel == 1
                      and isinstance(convs[-1], Conv) and convs[-1].kernel == 1
                      and any(isinstance(x, Depthwise) for x in convs[1:-1]))
        kinds.add("inverted bottleneck" if bottleneck else "residual pair")
    if not kinds:
        return "chain"
    return kinds.pop() if len(kinds) == 1 else "mixed blocks"


def _parses(text: str) -> bool:
    try:
        parse(text)
    except ArchError:
        return False
    return True


def size_class(params: int) -> str:
    """The size class of a candidate, e.g. ``1k-4k params``."""
    lo = 0
    for hi in SIZE_EDGES:
        if params < hi:
            return f"{_k(lo)}-{_k(hi)} params" if lo else f"under {_k(hi)} params"
        lo = hi
    return f"{_k(lo)} params or more"


def _k(n: int) -> str:
    return f"{n // 1000}k"


def _class_order(label: str) -> int:
    for i, hi in enumerate(SIZE_EDGES):
        if size_class(hi - 1) == label:
            return i
    return len(SIZE_EDGES)


def structure_table(ranking: pd.DataFrame) -> pd.DataFrame:
    """Per size class and structure (with colour): the best candidate, and the winner.

    Parameters
    ----------
    ranking : DataFrame
        :func:`search.rank.rank_run`'s table (``candidate``, ``params``, ``epochs``,
        ``folds``, ``acc_mean``, ``acc_se``, ``acc_min``, ``acc_max``).

    Returns
    -------
    DataFrame with :data:`COLUMNS`: ``compared`` is False for a structure whose
    candidates in that class all stopped before the class's longest training;
    ``won`` marks the best compared one; ``lead_se`` is its lead over the
    runner-up in the runner-up's standard errors (NaN without a runner-up).
    A candidate whose text does not parse (a damaged store) is left out.
    """
    # a run with several recipes keys candidates by architecture and recipe: read the
    # architecture (column ``arch``) where the ranking has it
    texts = ranking["arch"] if "arch" in ranking else ranking["candidate"]
    readable = [_parses(t) for t in texts] if len(ranking) else []
    frame = ranking[readable].copy() if len(ranking) else ranking
    if frame.empty:
        return pd.DataFrame(columns=list(COLUMNS))
    arch_texts = frame["arch"] if "arch" in frame else frame["candidate"]
    frame["structure"] = [structure_of(t) for t in arch_texts]
    frame["colour"] = [parse(t).input.mode for t in arch_texts]
    frame["size"] = [size_class(int(p)) for p in frame["params"]]
    rows = []
    for size, group in frame.groupby("size", sort=False):
        top = group["epochs"].max()
        for (structure, colour), part in group.groupby(["structure", "colour"], sort=True):
            longest = part[part["epochs"] == top]
            compared = not longest.empty
            pool = longest if compared else part[part["epochs"] == part["epochs"].max()]
            best = pool.sort_values(["acc_mean", "params"], ascending=[False, True]).iloc[0]
            rows.append({"size": size, "structure": structure, "colour": colour,
                         "candidate": best["candidate"], "params": int(best["params"]),
                         "epochs": int(best["epochs"]), "folds": int(best["folds"]),
                         "acc_mean": float(best["acc_mean"]), "acc_se": float(best["acc_se"]),
                         "acc_min": float(best.get("acc_min", math.nan)),
                         "acc_max": float(best.get("acc_max", math.nan)),
                         "compared": compared, "won": False, "lead_se": math.nan})
    out = pd.DataFrame(rows, columns=list(COLUMNS))
    out["_order"] = [_class_order(s) for s in out["size"]]
    out = out.sort_values(["_order", "acc_mean"], ascending=[True, False], kind="stable")
    for _, group in out[out["compared"]].groupby("size", sort=False):
        ranked = group.sort_values("acc_mean", ascending=False)
        first = ranked.index[0]
        out.loc[first, "won"] = True
        if len(ranked) > 1:
            second = ranked.iloc[1]
            gap = ranked.iloc[0]["acc_mean"] - second["acc_mean"]
            out.loc[first, "lead_se"] = gap / second["acc_se"] if second["acc_se"] > 0 \
                else math.inf
    return out.drop(columns="_order").reset_index(drop=True)


def _who(row: pd.Series) -> str:
    return f"{row['structure']} ({row['colour']})"


def _accuracy(row: pd.Series) -> str:
    return (f"{pct(row['acc_mean'])} \u00b1 {pct(row['acc_se'])}, folds "
            f"{pct(row['acc_min'])} to {pct(row['acc_max'])}")


def structure_sentences(frame: pd.DataFrame) -> list[str]:
    """One plain sentence per size class: who won, by how much, against whom."""
    out = []
    for size, group in frame.groupby("size", sort=False):
        compared = group[group["compared"]]
        if compared.empty:
            continue
        win = compared[compared["won"]].iloc[0]
        text = (f"{size}: {_who(win)} won with {win['candidate']} at {_accuracy(win)} "
                f"after {int(win['epochs'])} epochs")
        others = compared[~compared["won"]]
        if others.empty:
            text += "; no other structure of this size was trained as long."
        else:
            runner = others.iloc[0]
            noise = (" (within one standard error: the order may be noise)"
                     if win["lead_se"] < 1 else "")
            text += (f", ahead of {_who(runner)} at {pct(runner['acc_mean'])} \u00b1 "
                     f"{pct(runner['acc_se'])}{noise}.")
        out.append(text)
    return out


STRUCTURE_COLUMNS = (
    Column("size", "size", esc, numeric=False),
    Column("structure", "structure", esc, numeric=False),
    Column("colour", "colour", lambda v: f"<code>{esc(v)}</code>", numeric=False),
    Column("best candidate", "candidate", lambda v: f"<code>{esc(v)}</code>", numeric=False),
    Column("params", "params", num),
    Column("epochs", "epochs", num),
    Column("held-out acc", "_acc", esc, title="mean over folds \u00b1 standard error"),
    Column("fold range", "_range", esc, title="lowest and highest fold accuracy"),
    Column("verdict", "_verdict", esc, numeric=False),
)


def structure_section(ranking: pd.DataFrame) -> Section | None:
    """The page's section, or None when the run compared one structure and colour only."""
    frame = structure_table(ranking)
    if frame[["structure", "colour"]].drop_duplicates().shape[0] < 2:
        return None
    shown = frame.copy()
    shown["_acc"] = [f"{pct(m)} \u00b1 {pct(s)}" for m, s in zip(shown["acc_mean"],
                                                               shown["acc_se"])]
    shown["_range"] = [f"{pct(a)} to {pct(b)}" for a, b in zip(shown["acc_min"],
                                                                shown["acc_max"])]
    shown["_verdict"] = ["won" if w else ("" if c else "stopped earlier: not compared")
                         for w, c in zip(shown["won"], shown["compared"])]
    body = (table(shown, STRUCTURE_COLUMNS, highlight=list(shown["won"].astype(bool)))
            + "".join(paragraph(t) for t in structure_sentences(frame)))
    return Section("structure", "Which structure won at which size", body,
                   lead="Plain chains of layers against residual blocks (inverted bottlenecks "
                        "or plain pairs) and against stacked colour modes, size class by size "
                        "class. In each class only the candidates trained longest are "
                        "compared; each row is the best of its structure and colour there.")
