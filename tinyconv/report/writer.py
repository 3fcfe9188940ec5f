"""Write a report's files (page, figures, tables) from a run's plain data."""

from __future__ import annotations

from datetime import datetime, timezone
from pathlib import Path

from tinyconv import __version__
from tinyconv.errors import WriteError
from tinyconv.files import why_not_written, writable_folder, write_bytes_whole
from tinyconv.report.assemble import assemble
from tinyconv.report.html import page
from tinyconv.report.reuse import KEY_NAME, figure_key, record, reusable
from tinyconv.report.rundata import RunData
from tinyconv.report.decision import decision_panel
from tinyconv.report.sections import all_sections
from tinyconv.report.tables import REPORT_AGAIN, write_tables

PAGE_NAME = "report.html"


def render_report(data: RunData, out_dir: Path | None = None, *,
                  stamp: datetime | None = None) -> Path:
    """Render the figures, tables and page of ``data`` into ``out_dir``.

    Parameters
    ----------
    data : the run's plain data
    out_dir : folder to write into; the run folder when omitted
    stamp : time shown in the footer (now, UTC, when omitted)

    Returns
    -------
    Path of ``report.html``. The PNG figures and CSV tables are written
    beside it; the page embeds the same PNG bytes as data URIs.
    """
    out = Path(out_dir) if out_dir is not None else Path(data.run_dir)
    _ready(out, given=out_dir is not None)
    key = figure_key(data)
    parts = assemble(data, reusable(out, key))
    for name, png in parts.figures.items():
        if parts.reused.get(name) != png:  # a reused figure's file already holds it
            write_bytes_whole(out / name, png, then=REPORT_AGAIN)
    write_bytes_whole(out / KEY_NAME, record(parts.figures, key), then=REPORT_AGAIN)
    write_tables(out, parts.tables)
    cfg = data.config
    when = (stamp or datetime.now(timezone.utc)).strftime("%Y-%m-%d %H:%M UTC")
    meta = {"run": Path(data.run_dir).name or str(data.run_dir),
            "data": str(cfg.get("data", "?")),
            "classes": str(len(data.classes)),
            "folds": str(cfg.get("folds", "?")),
            "candidates ranked": str(len(data.ranking))}
    text = page("Which network to ship", "tinyconv run report", meta, decision_panel(data),
                all_sections(data, parts),
                f"Written by tinyconv {__version__} on {when} from {data.run_dir}.")
    return write_bytes_whole(out / PAGE_NAME, text.encode("utf-8"), then=REPORT_AGAIN)


def _ready(out: Path, given: bool) -> None:
    """Make the report folder, or say why it cannot be written (before any work)."""
    where = "--out folder" if given else "run folder"
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise WriteError(f"cannot make the report's {where} {out}: {why_not_written(exc)}; "
                         "give --out A_FOLDER_YOU_CAN_WRITE") from None
    if not writable_folder(out):
        raise WriteError(f"cannot write the report into the {where} {out}: it is not "
                         "writable (a read-only file system or no permission); the run is "
                         "only read, so give --out A_FOLDER_YOU_CAN_WRITE")
