"""The report written after a search or an export, whose failure never loses results."""

from __future__ import annotations

from pathlib import Path


def write_report_if_available(run_dir) -> tuple[str, str]:
    """(state, text): ``("written", path)``, ``("missing", why)`` or ``("failed", why)``."""
    try:
        from tinyconv.report import write_report
    except ImportError as exc:
        return "missing", f"the report is not available in this installation ({exc})"
    try:
        return "written", str(write_report(run_dir))
    except Exception as exc:  # the results are safe in the store either way
        return "failed", (f"{type(exc).__name__}: {exc}; the results are in "
                          f"{Path(run_dir) / 'run.sqlite'}; 'tinyconv report {run_dir}' "
                          "tries again")
