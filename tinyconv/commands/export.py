"""``tinyconv export DIR --pick one-se|best|CANDIDATE``: the pick, retrained, as int8 C.

Reads the run folder a search wrote, chooses a candidate from its ranking,
retrains it on all the data (the search's training settings with the
candidate's own recipe; the epochs of its final rung unless ``--epochs`` is
given), quantises it to int8 with
``--calib`` calibration images and writes ``network.npz``, ``{prefix}.c``,
``{prefix}.h`` and ``summary.json`` into ``--out`` (default ``DIR/export``).
Prints the sizes and how often the int8 network picks the float network's
class; the retraining's progress goes to stderr in a few lines (``--each-epoch``
for all). When the files go into ``DIR/export``, the run's report is written
again, so that it shows the export's figures. Exit codes: 0 done, 1 the
retraining diverged (or the report failed), 2 bad input.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from tinyconv.commands._args import add_device_options, positive_int
from tinyconv.workflows.export_pick import export_run
from tinyconv.workflows.report_step import write_report_if_available

PICKS = ("one-se", "best")


def configure(parser: argparse.ArgumentParser) -> None:
    """Options of the export command."""
    parser.add_argument("run_dir", metavar="DIR", help="the run folder a search wrote")
    parser.add_argument("--pick", default="one-se", metavar="one-se|best|CANDIDATE",
                        help="which candidate: the one-standard-error pick (default; simplest "
                             "by the run's --simplest-by), the best mean accuracy, or a ranked "
                             "candidate's text (with its recipe when the run has several)")
    parser.add_argument("--out", default=None, metavar="DIR2",
                        help="folder for the files (default DIR/export)")
    parser.add_argument("--epochs", type=positive_int, default=None, metavar="N",
                        help="training epochs (default: those of the candidate's final rung)")
    parser.add_argument("--calib", type=positive_int, default=256, metavar="N",
                        help="calibration images for the int8 ranges (default 256)")
    parser.add_argument("--prefix", default="tc", metavar="ID",
                        help="prefix of the C symbols and file names (default tc)")
    add_device_options(parser, "also build the C for this core, run it under QEMU on images "
                       "held out of the calibration and write device.json",
                       "the part's clock for the time figure")
    parser.add_argument("--device-images", type=positive_int, default=16, metavar="N",
                        help="images for the device run (default 16)")
    parser.add_argument("--each-epoch", action="store_true",
                        help="print a line for every epoch of the retraining (default: a few "
                             "lines, on stderr)")


def run(args: argparse.Namespace) -> int:
    """Export; print the summary lines to stdout, progress to stderr."""
    from tinyconv.errors import DivergedError

    def log(text: str) -> None:
        print(text, file=sys.stderr, flush=True)

    try:
        summary = export_run(args.run_dir, pick=args.pick, out_dir=args.out,
                             epochs=args.epochs, calib=args.calib, prefix=args.prefix, log=log,
                             core=args.core, clock_mhz=args.clock_mhz,
                             device_images=args.device_images, each_epoch=args.each_epoch)
    except DivergedError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 1
    for line in summary.lines():
        print(line)
    if args.out is None:  # the report reads DIR/export: show the export's figures there
        state, text = write_report_if_available(Path(args.run_dir))
        print(f"report: {text}", file=sys.stdout if state == "written" else sys.stderr)
        return 1 if state == "failed" else 0
    return 0
