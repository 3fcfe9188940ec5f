"""The report's ranking table: the pick first, the groups in words, headers in words."""

from __future__ import annotations

import pandas as pd

from tinyconv.report.html import Column, Section, esc, num, paragraph, pct, pvalue, table
from tinyconv.report.rundata import RunData
from tinyconv.report.words import acc_pm, arch_code, count

MS_COLUMN = Column("time (ms)", "ms", lambda v: num(v, 2),
                   title="milliseconds per image on the run's device (cost model)")
#: The group column's words (search.rank.GROUPS); a lower rung says which.
GROUP_WORDS = {"pick": "the pick", "within_one_se": "within one SE of the best",
               "outside_one_se": "further from the best"}
RANKING_COLUMNS = (
    Column("order", "_order", num, title="the row's place in ranking.csv"),
    Column("group", "_group", esc, numeric=False,
           title="the pick, the others within one standard error of the best, the rest, "
                 "and candidates stopped at a lower rung"),
    Column("candidate", "candidate", arch_code, numeric=False),
    Column("held-out accuracy", "_acc", esc, title="mean over folds \u00b1 standard error"),
    Column("training accuracy", "train_acc_mean", pct),
    Column("over-fitting gap", "gap", lambda v: pct(v, 1),
           title="training minus held-out accuracy"),
    Column("gain per 1,000 parameters", "acc_per_kparam", lambda v: num(100 * float(v), 2),
           title="percentage points of held-out accuracy above chance per 1,000 parameters"),
    Column("parameters", "params", num),
    Column("MACs per image", "macs", num, title="multiply-accumulates per image"),
    Column("peak RAM (KB)", "peak_kb", lambda v: num(v, 1),
           title="peak activation memory, int8"),
    Column("flash (KB)", "flash_kb", lambda v: num(v, 1), title="int8 weights and tables"),
    Column("epochs", "epochs", num),
    Column("p against the best", "p_vs_best", pvalue,
           title="corrected resampled t-test against the best"),
)
# Shown when the run trained candidates with several recipes.
RECIPE_COLUMN = Column("recipe", "recipe", arch_code, numeric=False,
                       title="augmentation, copies per epoch, learning rate, weight decay, "
                             "schedule")
# Shown when the search scored the int8 form (search --int8).
INT8_COLUMN = Column("int8 accuracy", "int8_acc_mean", pct,
                     title="mean held-out accuracy of the int8 quantised network")


def group_words(row: pd.Series) -> str:
    """The group of a ranking row in words; a lower rung names its rung and epochs."""
    group = str(row.get("group", ""))
    if group not in GROUP_WORDS and bool(row.get("finalist", True)):  # a table without groups
        group = ("pick" if row.get("pick") else "within_one_se" if row.get("within_1se")
                 else "outside_one_se")
    if group in GROUP_WORDS:
        return GROUP_WORDS[group]
    return f"stopped at rung {int(row['rung']) + 1} ({count(int(row['epochs']), 'epoch')})"


def ranking_legend(by: str | None) -> str:
    """How the ranking's rows are ordered, in one sentence."""
    order = ("mean held-out accuracy" if by == "accuracy"
             else "accuracy gained over chance per 1,000 parameters")
    return ("Rows: the pick (highlighted), then the other candidates within one standard "
            "error of the best, then the rest, each group ordered by " + order + ". "
            "Candidates stopped at a lower rung come last: they were measured after fewer "
            "epochs, so they are not compared with the finalists and are never picked.")


def ranking_section(data: RunData) -> Section:
    frame = data.ranking.copy()
    frame["_acc"] = [acc_pm(r) for _, r in frame.iterrows()]
    frame["_order"] = range(1, len(frame) + 1)
    frame["_group"] = [group_words(r) for _, r in frame.iterrows()]
    columns = RANKING_COLUMNS
    extra = []
    if "int8_acc_mean" in frame and frame["int8_acc_mean"].notna().any():
        columns = columns[:5] + (INT8_COLUMN,) + columns[5:]
    if "ms" in frame and frame["ms"].notna().any():  # the run names a device
        columns = columns[:-2] + (MS_COLUMN,) + columns[-2:]
    if "recipe" in frame and frame["recipe"].nunique() > 1:  # architecture and recipe apart
        at = [c.key for c in columns].index("candidate")
        columns = (columns[:at] + (Column("architecture", "arch", arch_code, numeric=False),
                                   RECIPE_COLUMN) + columns[at + 1:])
    elif "recipe" in frame and len(frame) and frame["recipe"].iloc[0]:
        extra.append(f"Every candidate was trained with one recipe: {frame['recipe'].iloc[0]} "
                     "(augmentation, copies of each image per epoch, learning rate, weight "
                     "decay, schedule).")
    body = table(frame, columns, highlight=list(frame["pick"].astype(bool)), css="ranking")
    n_lower = int((~data.ranking.get("finalist", pd.Series(True, index=frame.index))
                   .astype(bool)).sum())
    if n_lower:
        extra.append(f"{count(n_lower, 'candidate')} stopped at a lower rung (fewer epochs): "
                     "listed last, taking no part in the pick.")
    extra.append(f"Chance accuracy with {len(data.classes)} classes is {pct(data.chance)}; "
                 "the gain per 1,000 parameters counts only the part above chance. "
                 "ranking.csv holds the same rows in the same order, with the group of each.")
    measure = str(data.config.get("simplest_by") or "params")
    return Section("ranking", "Ranking", body + "".join(paragraph(t) for t in extra),
                   lead=ranking_legend(data.rank_by) + f" The pick follows the one-standard-"
                        f"error rule, simplest by {measure}.")
