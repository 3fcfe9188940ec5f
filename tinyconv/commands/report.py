"""``tinyconv report DIR [--out DIR2] [--rank-by ...]``: write the HTML report of a run.

The run folder is only read; with ``--out`` nothing is written into it, so a
finished run in a read-only folder can be ranked again and reported elsewhere.
"""

from __future__ import annotations

import argparse


def configure(parser: argparse.ArgumentParser) -> None:
    """Options of the report command."""
    parser.add_argument("run_dir", metavar="DIR",
                        help="the run folder a search wrote (it holds run.sqlite)")
    parser.add_argument("--out", default=None, metavar="DIR2",
                        help="write the page, figures and tables here instead of into DIR "
                             "(for a run folder you cannot write)")
    parser.add_argument("--rank-by", choices=("per-param", "accuracy"), default=None,
                        help="rank in this order (default: the order the search used)")


def run(args: argparse.Namespace) -> int:
    """Write report.html, the figures and the tables; print the page's path."""
    from tinyconv.report import write_report

    rank_by = args.rank_by.replace("-", "_") if args.rank_by else None
    path = write_report(args.run_dir, out_dir=args.out, rank_by=rank_by)
    print(path)
    return 0
