"""The ranking of a run as a value: its table, its pick, its best, its finalists.

:func:`search.rank.rank_units` makes the table; :class:`Ranking` wraps it so
that every reader (the search's summary, the export, the report) asks one
object which candidate is the pick, which is the best and which rows take
part in the choice, instead of working it out again from the columns.
"""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd


@dataclass(frozen=True)
class Ranking:
    """A ranking table (:func:`search.rank.rank_units`) and what it says.

    Attributes
    ----------
    table : DataFrame
        One row per candidate in the ranking's order (the pick first). A
        table without a ``finalist`` column counts every row as a finalist.
    """

    table: pd.DataFrame

    @property
    def empty(self) -> bool:
        """True when no candidate is ranked yet."""
        return self.table.empty

    @property
    def finalists(self) -> pd.DataFrame:
        """Rows at the highest rung: those that take part in the best and the pick."""
        if "finalist" in self.table.columns:
            return self.table[self.table["finalist"].astype(bool)]
        return self.table

    @property
    def pick(self) -> pd.Series:
        """The row of the one-standard-error pick (the ``pick`` column)."""
        return self.table[self.table["pick"].astype(bool)].iloc[0]

    @property
    def best(self) -> pd.Series:
        """The finalist of highest mean held-out accuracy; ties go to fewer
        parameters, then to the candidate's text (the rule of
        :func:`search.rank.one_se_pick`, whose best sets the one-SE bar)."""
        order = self.finalists.sort_values(["acc_mean", "params", "candidate"],
                                           ascending=[False, True, True], kind="stable")
        return order.iloc[0]

    def best_least(self, cost: str) -> pd.Series:
        """The finalist of highest mean held-out accuracy; ties go to the least
        ``cost`` (a column, e.g. ``params`` or ``macs``), then to the table's order.

        The terminal summary names this best for ``params`` and the Pareto
        figures for their size axis. It is :attr:`best` except when finalists
        tie exactly in mean (and, for ``params``, in parameters).
        """
        order = self.finalists.sort_values(["acc_mean", cost], ascending=[False, True],
                                           kind="stable")
        return order.iloc[0]

    def row(self, candidate: str) -> pd.Series | None:
        """The row of ``candidate``, or None when it is not ranked."""
        rows = self.table[self.table["candidate"] == candidate]
        return rows.iloc[0] if len(rows) else None
