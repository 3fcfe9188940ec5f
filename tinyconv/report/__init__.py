"""The run report: figures (matplotlib, Agg), a self-contained HTML page, CSV tables.

``write_report(run_dir)`` reads the run folder's store and writes, into the
same folder, ``report.html`` (every image embedded as a data URI; no
scripts, no external files), the PNG figures and the CSV tables.

The figure functions (:mod:`.boxes`, :mod:`.pareto`, :mod:`.curves`,
:mod:`.confusion`, :mod:`.gallery`) take plain arrays and frames and return
a :class:`matplotlib.figure.Figure`; nothing here uses pyplot.
"""

from __future__ import annotations

from pathlib import Path


def write_report(run_dir: str | Path) -> Path:
    """Write the report of the run in ``run_dir``; returns the path of ``report.html``.

    Raises
    ------
    tinyconv.errors.RunError
        When the folder is missing, holds no run, or no candidate has
        finished every fold of a rung yet.
    """
    from tinyconv.report.collect import collect
    from tinyconv.report.writer import render_report

    return render_report(collect(run_dir))
