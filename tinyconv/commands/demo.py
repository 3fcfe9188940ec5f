"""``tinyconv demo [--out DIR] [--quick]``: the whole job on the built-in tile images.

The workshop-tile scenario (eight maker's marks on 32x32 colour tiles, a
device with 256 KB of flash and 64 KB of SRAM) and the shipped demo space:
a successive-halving search with 3-fold cross-validation, the report, and
the int8 export of the one-standard-error pick. About three to five minutes
on two cores; ``--quick`` (fewer images, fewer candidates, fewer epochs) in under a
minute. Re-running resumes the search in the same folder.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from tinyconv import fmt
from tinyconv.checks import whole_number
from tinyconv.commands._notes import kernels_note
from tinyconv.workflows.demo import DEVICE, demo_request
from tinyconv.workflows.progress import SearchProgress, terminal_width
from tinyconv.workflows.report_step import write_report_if_available
from tinyconv.workflows.summary import summary_lines


def configure(parser: argparse.ArgumentParser) -> None:
    """Add this command's arguments."""
    parser.add_argument("--out", default=None, metavar="DIR",
                        help="run folder (default ./tinyconv-demo, or ./tinyconv-demo-quick)")
    parser.add_argument("--quick", action="store_true",
                        help="a smaller demo that finishes in under a minute")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="local worker processes (default: the number of cores)")


def export_pick(run_dir: Path) -> tuple[str, list[str]]:
    """(state, lines): the export of the pick, or why it is not available."""
    try:
        from tinyconv.workflows.export_pick import export_run
    except ImportError as exc:
        return "missing", [f"export: not available in this installation ({exc})"]
    from tinyconv.device.toolchain import ToolMissing, find_toolchain

    notes = []
    core = DEVICE["core"]
    try:
        find_toolchain()
    except ToolMissing as exc:  # an optional part: say how to add it, carry on without it
        core = None
        notes.append(f"device: not measured: {exc}")
    summary = export_run(run_dir, pick="one-se", core=core, clock_mhz=DEVICE["clock_mhz"],
                         log=lambda text: print(text, file=sys.stderr, flush=True))
    return "written", list(summary.lines()) + notes


def run(args: argparse.Namespace) -> int:
    """Search, report, export; print the pick."""
    from search.session import run_search

    if args.workers is not None:
        whole_number(args.workers, "--workers", low=0)
    out = Path(args.out or ("tinyconv-demo-quick" if args.quick else "tinyconv-demo"))
    start = time.perf_counter()
    request = demo_request(out, args.quick, args.workers)
    print(f"demo: searching the tile demo space on {request.data} ({'quick' if args.quick else 'full'}"
          f" demo) into {out}", file=sys.stderr, flush=True)
    note = kernels_note()
    if note:
        print(note, file=sys.stderr, flush=True)
    summary = run_search(request, SearchProgress(None, None))
    print("\n".join(summary_lines(summary, width=terminal_width(sys.stdout) or None)))
    code = 0
    if not summary.table.empty:
        state, lines = export_pick(out)
        print("\n".join(lines))
    # after the export, so that the report shows the pick measured on the device
    state, text = write_report_if_available(out)
    print(f"report: {text}", file=sys.stdout if state == "written" else sys.stderr)
    code = 1 if state == "failed" else code
    if not summary.table.empty:
        row = summary.ranking.pick
        print(f"demo pick: {row.candidate} ({fmt.accuracy(row.acc_mean, row.acc_se)} held-out "
              f"accuracy, {fmt.count(row.params)} parameters) in "
              f"{time.perf_counter() - start:.0f} s")
    return code
