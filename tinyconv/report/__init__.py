"""The run report: figures (matplotlib, Agg), a self-contained HTML page, CSV tables.

``write_report(run_dir, out_dir=None)`` reads the run folder's store (never
changing it) and writes, into the same folder or ``out_dir``, ``report.html`` (every image embedded as a data URI; no
scripts, no external files), the PNG figures and the CSV tables.

The figure functions (:mod:`.boxes`, :mod:`.pareto`, :mod:`.curves`,
:mod:`.confusion`, :mod:`.gallery`) take plain arrays and frames and return
a :class:`matplotlib.figure.Figure`; nothing here uses pyplot.
"""

from __future__ import annotations

from pathlib import Path


def write_report(run_dir: str | Path, out_dir: str | Path | None = None,
                 rank_by: str | None = None) -> Path:
    """Write the report of the run in ``run_dir``; returns the path of ``report.html``.

    Parameters
    ----------
    run_dir : the run folder (only read: nothing in its store changes)
    out_dir : where to write the page, figures and tables (the run folder when
        omitted); another folder serves a run in a read-only folder
    rank_by : ``per_param`` or ``accuracy`` to rank in that order; the order
        the search was asked for when omitted

    Raises
    ------
    tinyconv.errors.RunError
        When the folder is missing, holds no run, or no candidate has
        finished every fold of a rung yet; a damaged store is a ``StoreError``
        and a folder that cannot be written a ``WriteError``.
    """
    from tinyconv.report.collect import collect
    from tinyconv.report.writer import render_report

    return render_report(collect(run_dir, rank_by=rank_by), out_dir)
