"""``tinyconv search DATA --space FILE --out DIR``: the budgeted, cross-validated search.

Re-running the same command in the same ``--out`` folder resumes it: finished
units are never recomputed. Progress goes to stderr (two bars: the budget or
the plan, and the current rung); the summary, ranking and report paths to
stdout. Exit codes: 0 done (also when a budget ended the search: what
finished is ranked), 2 bad input or a folder holding another run, 130
interrupted (finished units are kept).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from search.config import format_duration, parse_duration
from search.runner import Progress
from tinyconv.commands._args import count, positive_float, positive_int

DATA_HELP = ("a folder with one sub-folder per class, a .npz file (x, y), "
             "builtin:tiles[?n=100&size=32&seed=0] or builtin:digits")
STATE_TEXT = {"complete": "the whole plan ran",
              "budget_cpu": "the CPU budget ran out; what finished is ranked",
              "budget_epochs": "the epoch budget ran out; what finished is ranked",
              "interrupted": "interrupted"}


def add_search_options(parser: argparse.ArgumentParser) -> None:
    """Options shared by ``search`` (and read by ``demo``)."""
    g = parser.add_argument_group("cross-validation and schedule")
    g.add_argument("--folds", type=int, default=3, metavar="K",
                   help="stratified folds (default 3)")
    g.add_argument("--budget-cpu", default=None, metavar="T",
                   help="total CPU time for training, e.g. 90s, 20m, 1h (default: no limit)")
    g.add_argument("--budget-epochs", type=positive_int, default=None, metavar="N",
                   help="total training epochs summed over all units (default: no limit)")
    g.add_argument("--max-epochs", type=positive_int, default=9, metavar="R",
                   help="epochs of the final rung (default 9)")
    g.add_argument("--min-epochs", type=positive_int, default=1, metavar="N",
                   help="fewest epochs of any rung: leave out shorter rungs when a few "
                        "epochs say nothing yet (default 1)")
    g.add_argument("--eta", type=int, default=3, help="halving rate: each rung keeps 1/eta "
                   "(default 3)")
    g.add_argument("--int8", action="store_true",
                   help="also score the int8 quantised form of every unit of the last rung, "
                        "so the ranking shows the accuracy lost to quantisation")
    g.add_argument("--full", action="store_true",
                   help="no halving: every candidate trains R epochs on every fold")
    g.add_argument("--max-candidates", type=positive_int, default=None, metavar="N",
                   help="a seeded sample of N of the candidates within budget")
    g.add_argument("--seed", type=int, default=0, help="run seed (default 0)")
    g.add_argument("--rank-by", choices=("per-param", "accuracy"), default="per-param",
                   help="order of the ranking: accuracy over chance per 1,000 parameters "
                        "(default) or mean held-out accuracy")
    g.add_argument("--simplest-by", choices=("params", "macs", "ram", "flash", "ms"),
                   default="params",
                   help="what the one-standard-error pick minimises among the candidates "
                        "within one SE of the best: parameters (default), MACs, int8 peak "
                        "RAM, int8 flash, or ms per image on the device (needs --core or a "
                        "[device] table)")
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
    b.add_argument("--core", default=None, metavar="CORE",
                   help="the device's core for the time: cortex-m3, cortex-m4, cortex-m7, "
                        "cortex-m33")
    b.add_argument("--clock-mhz", type=positive_float, default=None, metavar="F",
                   help="the device's clock (default: the core's assumed clock)")
    t = parser.add_argument_group("training of every unit (the recipe options replace the "
                                  "space's [training] choices)")
    t.add_argument("--lr", type=positive_float, default=None,
                   help="learning rate (default 0.005)")
    t.add_argument("--schedule", choices=("constant", "step", "cosine"), default=None,
                   help="learning-rate schedule over the epochs (default constant)")
    t.add_argument("--augment", default=None, metavar="TEXT",
                   help="augmentation of the training batches, e.g. shift2+mirror+upend+turn "
                        "(default none; forms in the README)")
    t.add_argument("--copies", type=positive_int, default=None, metavar="N",
                   help="copies of each training image an epoch passes over, each augmented "
                        "on its own (default 1)")
    t.add_argument("--batch-size", type=positive_int, default=None, metavar="N",
                   help="images per mini-batch (default 16)")
    t.add_argument("--optimizer", choices=("adam", "sgd"), default=None,
                   help="optimiser (default adam)")
    t.add_argument("--weight-decay", type=float, default=None, metavar="W",
                   help="decoupled weight decay (default 0)")
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
    parser.add_argument("--space", required=True, metavar="FILE",
                        help="search-space file (TOML), or builtin:demo")
    parser.add_argument("--out", required=True, metavar="DIR",
                        help="run folder: created, or resumed when it holds this search")
    parser.add_argument("--skip-bad", action="store_true",
                        help="leave out unreadable images (they are counted) instead of "
                             "stopping with the list of them")
    add_search_options(parser)


def request_from(args: argparse.Namespace, data: str, space: str, out: str):
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
        max_epochs=args.max_epochs, min_epochs=args.min_epochs, full=args.full, max_candidates=args.max_candidates,
        budgets={"max_params": args.max_params, "max_macs": args.max_macs,
                 "max_ram_kb": args.max_ram_kb, "max_flash_kb": args.max_flash_kb,
                 "max_ms": args.max_ms, "core": args.core, "clock_mhz": args.clock_mhz},
        budget_cpu_s=parse_duration(args.budget_cpu) if args.budget_cpu else None,
        budget_epochs=args.budget_epochs, training=training, workers=args.workers,
        cluster=args.cluster, rank_by=args.rank_by.replace("-", "_"),
        skip_bad=bool(getattr(args, "skip_bad", False)), int8=bool(args.int8),
        simplest_by=args.simplest_by)


class BarProgress(Progress):
    """Two tqdm bars on stderr: the budget (or the plan) and the current rung.

    When stderr is not a terminal the bars are off and each rung prints one line.
    """

    def __init__(self, settings_budget_cpu: float | None, budget_epochs: int | None):
        self.cpu_budget, self.epoch_budget = settings_budget_cpu, budget_epochs
        self.main = self.rung_bar = None
        self.live = sys.stderr.isatty()

    @staticmethod
    def _bar(**kw):
        from tqdm import tqdm
        return tqdm(file=sys.stderr, dynamic_ncols=True, disable=None, **kw)

    def start(self, plan_units, done_units, cpu_s, epochs):
        if self.cpu_budget:
            total = round(self.cpu_budget)
            self.main = self._bar(total=total, initial=min(round(cpu_s), total),
                                  unit="cpu-s", desc="CPU budget", position=0)
        elif self.epoch_budget:
            self.main = self._bar(total=self.epoch_budget,
                                  initial=min(epochs, self.epoch_budget), unit="epoch",
                                  desc="epoch budget", position=0)
        else:
            self.main = self._bar(total=plan_units, initial=min(done_units, plan_units),
                                  unit="unit", desc="plan (at most)", position=0)

    def rung(self, bracket, n_brackets, rung, n_rungs, candidates, folds, epochs, done):
        if self.rung_bar is not None:
            self.rung_bar.close()
        desc = (f"bracket {bracket + 1}/{n_brackets} rung {rung + 1}/{n_rungs}: "
                f"{candidates} x {folds} folds, {epochs} ep")
        if not self.live:
            print(f"{desc} ({done} of {candidates * folds} units stored)", file=sys.stderr,
                  flush=True)
        self.rung_bar = self._bar(total=candidates * folds, initial=done, unit="unit",
                                  desc=desc, position=1, leave=False)

    def unit(self, result, cpu_s, epochs):
        if self.rung_bar is not None:
            self.rung_bar.update(1)
        if self.main is not None:
            if self.cpu_budget:
                self.main.update(max(0, min(round(cpu_s), self.main.total) - self.main.n))
            elif self.epoch_budget:
                self.main.update(max(0, min(epochs, self.main.total) - self.main.n))
            else:
                self.main.update(1)

    def close(self):
        for bar in (self.rung_bar, self.main):
            if bar is not None:
                bar.close()


def _fmt_row(r) -> str:
    return (f"{int(r.rank_per_param):>4} {int(r.rank_accuracy):>4}  {r.acc_mean:.3f}±"
            f"{r.acc_se:.3f}  {r.train_acc_mean:.3f}  {r.acc_per_kparam:8.3f}  "
            f"{int(r.params):>7,}  {int(r.macs):>9,}  {r.peak_kb:6.1f}  {r.flash_kb:6.1f}  "
            f"{int(r.epochs):>3}  {'' if r.p_vs_best != r.p_vs_best else f'{r.p_vs_best:.3f}':>5}"
            f"  {'*' if r.pick else ' '}{r.candidate}")


def summary_lines(summary, top: int = 10) -> list[str]:
    """The one-screen summary of a finished (or stopped) search."""
    o, t = summary.outcome, summary.table
    over = ", ".join(f"{k} {v}" for k, v in summary.removed.items() if v)
    lines = [f"candidates: {summary.n_candidates} in the space, {summary.n_within} within "
             f"budget{f' (over {over})' if over else ''}, {summary.n_searched} searched",
             f"units: {o.units_run} run now, {o.units_stored} stored ({o.diverged} diverged, "
             f"{o.failed} failed, {o.retried} retried after a lost worker); training CPU "
             f"{format_duration(o.cpu_s)}, {o.epochs} epochs in all; {summary.workers}",
             f"end: {STATE_TEXT.get(o.state, o.state)}"]
    lines += [f"note: {n}" for n in o.notes]
    if t.empty:
        lines.append("no candidate has finished every fold of a rung yet: nothing to rank")
        return lines
    from search.rank import SIMPLEST_WORDS
    simplest = getattr(summary, "simplest_by", "params")
    lines += ["", f"rank: per-kparam, accuracy; * = pick (one-SE rule: "
              f"{SIMPLEST_WORDS[simplest]}); p = corrected t-test vs the best",
              "  pp  acc  held-out     train  acc/kpar   params       MACs  pk KB  fl KB   ep"
              "      p  candidate"]
    lines += [_fmt_row(r) for r in t.head(top).itertuples()]
    if "recipe" in t and t["recipe"].nunique() == 1 and t["recipe"].iloc[0]:
        lines.append(f"recipe of every candidate: {t['recipe'].iloc[0]}")
    if len(t) > top:
        lines.append(f"  ... {len(t) - top} more in {summary.ranking_path}")
    pick = t[t["pick"]].iloc[0]
    best = t[t["finalist"]].sort_values(["acc_mean", "params"], ascending=[False, True]).iloc[0]
    lines += ["", f"pick: {pick.candidate}  held-out accuracy {pick.acc_mean:.3f} ± "
                  f"{pick.acc_se:.3f} over {int(pick.folds)} folds, {int(pick.params):,} "
                  f"parameters, {pick.peak_kb:.1f} KB RAM, {pick.flash_kb:.1f} KB flash"
                  + (f", {pick.ms:.2f} ms per image (model)" if pick.ms == pick.ms else ""),
              f"      ({SIMPLEST_WORDS[simplest]} within one standard error of the best)",
              f"best: {best.candidate}  {best.acc_mean:.3f} ± {best.acc_se:.3f}, "
              f"{int(best.params):,} parameters"]
    if "int8_acc_mean" in t and t["int8_acc_mean"].notna().any():
        lines.append(f"int8: the pick scores {pick.int8_acc_mean:.3f} held-out as int8 "
                     f"({pick.int8_drop * 100:+.1f} points lost to quantisation); "
                     "column int8_acc_mean of the ranking")
    lines.append(f"ranking: {summary.ranking_path}")
    return lines


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


def run(args: argparse.Namespace) -> int:
    """Run or resume the search, print the summary, write the report."""
    from search.session import run_search

    request = request_from(args, args.data, args.space, args.out)
    progress = BarProgress(request.budget_cpu_s, request.budget_epochs)
    summary = run_search(request, progress)
    print("\n".join(summary_lines(summary)))
    state, text = write_report_if_available(summary.run_dir)
    if state == "written":
        print(f"report: {text}")
        return 0
    print(f"report: {text}", file=sys.stderr)
    return 0 if state == "missing" else 1
