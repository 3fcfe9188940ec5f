"""``tinyconv search DATA --space FILE --out DIR``: the budgeted, cross-validated search.

Re-running the same command in the same ``--out`` folder resumes it: finished
units are never recomputed. Progress goes to stderr (bars in a terminal,
lines otherwise: :mod:`tinyconv.workflows.progress`); the summary, ranking and
report paths to stdout. Exit codes: 0 done (also when a budget ended the search: what
finished is ranked), 2 bad input or a folder holding another run, 130
interrupted (finished units are kept).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from search import config as cfg
from search.config import parse_duration
from tinyconv.commands._args import add_device_options, count, positive_float, positive_int
from tinyconv.commands._notes import kernels_note
from tinyconv.workflows.progress import SearchProgress, terminal_width
from tinyconv.workflows.report_step import write_report_if_available
from tinyconv.workflows.summary import summary_lines

DATA_HELP = ("a folder with one sub-folder per class, a .npz file (x, y), "
             "builtin:tiles[?n=100&size=32&seed=0] or builtin:digits")


def add_budget_options(parser: argparse.ArgumentParser) -> None:
    """The device budgets (``search`` and ``space``)."""
    b = parser.add_argument_group("device budgets (override the space file's)")
    b.add_argument("--max-params", type=positive_int, default=None, metavar="N")
    b.add_argument("--max-macs", type=positive_int, default=None, metavar="N",
                   help="multiply-accumulates per image")
    b.add_argument("--max-ram-kb", type=positive_float, default=None, metavar="KB",
                   help="int8 peak activation memory (KB = 1,024 bytes)")
    b.add_argument("--max-flash-kb", type=positive_float, default=None, metavar="KB",
                   help="int8 weights, tables and per-channel constants")
    b.add_argument("--max-ms", type=positive_float, default=None, metavar="MS",
                   help="milliseconds per image on the device (the cost model's time; "
                        "needs --core or a [device] table)")
    add_device_options(b, "the device's core for the time", "the device's clock")


def budgets_from(args: argparse.Namespace) -> dict:
    """The budget options as ``SearchRequest.budgets``."""
    return {"max_params": args.max_params, "max_macs": args.max_macs,
            "max_ram_kb": args.max_ram_kb, "max_flash_kb": args.max_flash_kb,
            "max_ms": args.max_ms, "core": args.core, "clock_mhz": args.clock_mhz}


def add_search_options(parser: argparse.ArgumentParser) -> None:
    """Options shared by ``search`` (and read by ``demo``); defaults from
    :mod:`search.config`."""
    train = cfg.DEFAULT_TRAINING
    g = parser.add_argument_group("cross-validation and schedule")
    g.add_argument("--folds", type=int, default=cfg.FOLDS, metavar="K",
                   help=f"stratified folds (default {cfg.FOLDS})")
    g.add_argument("--budget-cpu", default=None, metavar="T",
                   help="total CPU time for training, e.g. 90s, 20m, 1h (default: no limit)")
    g.add_argument("--budget-epochs", type=positive_int, default=None, metavar="N",
                   help="total training epochs summed over all units (default: no limit)")
    g.add_argument("--top-epochs", type=positive_int, default=cfg.TOP_EPOCHS, metavar="R",
                   help=f"epochs of the final rung (default {cfg.TOP_EPOCHS})")
    g.add_argument("--base-epochs", type=positive_int, default=cfg.BASE_EPOCHS, metavar="N",
                   help="fewest epochs of any rung: leave out shorter rungs when a few "
                        f"epochs say nothing yet (default {cfg.BASE_EPOCHS})")
    g.add_argument("--eta", type=int, default=cfg.ETA, help="halving rate: each rung keeps "
                   f"1/eta (default {cfg.ETA})")
    g.add_argument("--int8", action="store_true",
                   help="also score the int8 quantised form of every unit of the last rung, "
                        "so the ranking shows the accuracy lost to quantisation")
    g.add_argument("--full", action="store_true",
                   help="no halving: every candidate trains R epochs on every fold")
    g.add_argument("--max-candidates", type=positive_int, default=None, metavar="N",
                   help="a seeded sample of N of the candidates within budget")
    g.add_argument("--seed", type=int, default=cfg.SEED, help=f"run seed (default {cfg.SEED})")
    g.add_argument("--rank-by", choices=("per-param", "accuracy"),
                   default=cfg.RANK_BY.replace("_", "-"),
                   help="order of the ranking: accuracy over chance per 1,000 parameters "
                        "(default) or mean held-out accuracy")
    g.add_argument("--simplest-by", choices=("params", "macs", "ram", "flash", "ms"),
                   default=cfg.SIMPLEST_BY,
                   help="what the one-standard-error pick minimises among the candidates "
                        "within one SE of the best: parameters (default), MACs, int8 peak "
                        "RAM, int8 flash, or ms per image on the device (needs --core or a "
                        "[device] table)")
    add_budget_options(parser)
    t = parser.add_argument_group("training of every unit (the recipe options replace the "
                                  "space's [training] choices)")
    t.add_argument("--lr", type=positive_float, default=None,
                   help=f"learning rate (default {train['lr']})")
    t.add_argument("--schedule", choices=("constant", "step", "cosine"), default=None,
                   help=f"learning-rate schedule over the epochs (default {train['schedule']})")
    t.add_argument("--augment", default=None, metavar="TEXT",
                   help="augmentation of the training batches, e.g. shift2+mirror+upend+turn "
                        f"(default {train['augment']}; forms in the README)")
    t.add_argument("--copies", type=positive_int, default=None, metavar="N",
                   help="copies of each training image an epoch passes over, each augmented "
                        f"on its own (default {train['copies']})")
    t.add_argument("--batch-size", type=positive_int, default=None, metavar="N",
                   help=f"images per mini-batch (default {train['batch_size']})")
    t.add_argument("--optimizer", choices=("adam", "sgd"), default=None,
                   help=f"optimiser (default {train['optimizer']})")
    t.add_argument("--weight-decay", type=float, default=None, metavar="W",
                   help=f"decoupled weight decay (default {train['weight_decay']:g})")
    x = parser.add_argument_group("where units run")
    x.add_argument("--workers", type=count, default=None, metavar="N",
                   help="local worker processes (default: the number of cores; 0 runs "
                        "the units in this process)")
    x.add_argument("--cluster", default=None, metavar="ADDR",
                   help="a Dask scheduler, e.g. tcp://HOST:8786, instead of local "
                        "processes (needs the 'cluster' extra)")


def configure(parser: argparse.ArgumentParser) -> None:
    """Add this command's arguments."""
    parser.add_argument("data", metavar="DATA", help=DATA_HELP)
    parser.add_argument("--space", default=None, metavar="FILE",
                        help="search-space file (TOML), or builtin:demo (default: a general "
                             "space sized for the data and the budgets; 'tinyconv space DATA "
                             "--write FILE' writes it out to edit)")
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="run folder: created, or resumed when it holds this search")
    parser.add_argument("--skip-bad", action="store_true",
                        help="leave out unreadable images (they are counted) instead of "
                             "stopping with the list of them")
    parser.add_argument("--report-later", action="store_true",
                        help="end without writing the report (it costs a few CPU seconds: "
                             "figures and page); 'tinyconv report DIR' writes it when wanted")
    add_search_options(parser)


def request_from(args: argparse.Namespace, data: str, space: str | None, out: str):
    """A SearchRequest from parsed options."""
    from search.session import SearchRequest
    training = {k: v for k, v in (("lr", args.lr), ("batch_size", args.batch_size),
                                  ("optimizer", args.optimizer),
                                  ("weight_decay", args.weight_decay),
                                  ("schedule", args.schedule),
                                  ("augment", args.augment),
                                  ("copies", args.copies)) if v is not None}
    return SearchRequest(
        data=data, space=space, out=Path(out), folds=args.folds, seed=args.seed, eta=args.eta,
        top_epochs=args.top_epochs, base_epochs=args.base_epochs, full=args.full, max_candidates=args.max_candidates,
        budgets=budgets_from(args),
        budget_cpu_s=parse_duration(args.budget_cpu) if args.budget_cpu else None,
        budget_epochs=args.budget_epochs, training=training, workers=args.workers,
        cluster=args.cluster, rank_by=args.rank_by.replace("-", "_"),
        skip_bad=bool(getattr(args, "skip_bad", False)), int8=bool(args.int8),
        simplest_by=args.simplest_by)


def run(args: argparse.Namespace) -> int:
    """Run or resume the search, print the summary, write the report."""
    from search.session import run_search

    request = request_from(args, args.data, args.space, args.out)
    note = kernels_note()
    if note:
        print(note, file=sys.stderr, flush=True)
    progress = SearchProgress(request.budget_cpu_s, request.budget_epochs)
    summary = run_search(request, progress)
    print("\n".join(summary_lines(summary, width=terminal_width(sys.stdout) or None)))
    if getattr(args, "report_later", False):
        print(f"report: not written (--report-later); 'tinyconv report {summary.run_dir}' "
              "writes it")
        return 0
    state, text = write_report_if_available(summary.run_dir)
    if state == "written":
        print(f"report: {text}")
        return 0
    print(f"report: {text}", file=sys.stderr)
    return 0 if state == "missing" else 1
