"""``tinyconv report DIR``: write the HTML report of a run folder."""

from __future__ import annotations

import argparse


def configure(parser: argparse.ArgumentParser) -> None:
    """Options of the report command."""
    parser.add_argument("run_dir", metavar="DIR",
                        help="the run folder a search wrote (it holds run.sqlite)")


def run(args: argparse.Namespace) -> int:
    """Write report.html, the figures and the tables into DIR; print the page's path."""
    from tinyconv.report import write_report

    path = write_report(args.run_dir)
    print(path)
    return 0
