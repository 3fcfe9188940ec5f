"""Search speed and what successive halving saves, on the tile demo space.

Usage::

    python benchmarks/search.py              # the full demo's settings, both parts
    python benchmarks/search.py --quick      # small data and few candidates (smoke run)
    python benchmarks/search.py --part sh    # only successive halving vs --full
    python benchmarks/search.py --part throughput --throughput-candidates 12 --throughput-epochs 3
    python benchmarks/search.py --part fixed
    python benchmarks/search.py --part budget

Four parts, each on fresh run folders (in a temporary folder unless ``--keep``):

1. **Throughput**: the same units (``--full`` on a seeded sample of the demo
   space) with 1 and with 2 local worker processes, alternated (1, 2, 1, 2,
   ...; ``--repeats`` runs of each, 2 by default): units (candidate-folds)
   per wall-clock hour and per CPU-hour from the median runs, and the
   parallel efficiency ``(rate_2 / rate_1) / 2`` on wall-clock time. Worker start-up is included,
   as a user would see it: about 1 s once per run (imports and Numba's first
   kernel loads), which weighs on runs of a few seconds (12 candidates of 3
   epochs: 1.3-1.6x) and little on the default, the demo's 40 candidates at
   27 epochs (120 units, about a minute of CPU). The rankings of all runs
   must be identical.
2. **Successive halving vs --full**: the demo search (Hyperband brackets) and
   the exhaustive run with the same final epochs: training CPU time of each
   and their ratio, and whether the halving run's one-SE pick has, in the
   full run, a mean accuracy within one standard error of the full run's best.
   The full run's units at the final epochs use the same seeds as the halving
   run's, so the pick's full figures are those of an identical training.

3. **Fixed cost per search** and 4. **budgeted vs exhaustive**: whole
   ``tinyconv search`` processes, CPU with their workers minus the units'
   training CPU (:mod:`_fixed_cost`).

The machine is shared: compare the figures within one run only.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

import _fixed_cost  # noqa: E402 (from this folder, before it leaves the path)

# This file is named like the package it measures: keep its folder off the path.
_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]


LR: list[float] = []   # --lr, when given


def _run(out: Path, workers: int, **change):
    from search.session import SearchRequest, run_search
    from tinyconv.workflows.demo import SPACE, TRAINING
    settings = dict(space=SPACE, workers=workers,
                    training={**TRAINING, **({"lr": LR[0]} if LR else {})})
    settings.update(change)
    start = time.perf_counter()
    summary = run_search(SearchRequest(out=out, **settings))
    return summary, time.perf_counter() - start


def throughput(root: Path, data: str, sample: int, epochs: int, repeats: int = 3) -> None:
    print(f"throughput: --full, {sample} sampled candidates x 3 folds, {epochs} epochs, {data}; "
          f"1 and 2 workers alternated, {repeats} runs each, medians [min-max]")
    print(f"{'workers':>7}  {'units':>5}  {'wall s':>18}  {'CPU s':>7}  {'units/wall-h':>12}  "
          f"{'units/CPU-h':>11}")
    walls: dict[int, list[float]] = {1: [], 2: []}
    cpus: dict[int, list[float]] = {1: [], 2: []}
    units, tables = {}, set()
    for r in range(repeats):
        for workers in (1, 2):
            summary, wall = _run(root / f"throughput_w{workers}_{r}", workers, data=data,
                                 full=True, top_epochs=epochs, max_candidates=sample)
            walls[workers].append(wall)
            cpus[workers].append(summary.outcome.cpu_s)
            units[workers] = summary.outcome.units_run
            tables.add(summary.ranking_path.read_bytes())
    rates = {}
    for workers in (1, 2):
        wall, cpu = float(np.median(walls[workers])), float(np.median(cpus[workers]))
        rates[workers] = units[workers] / wall * 3600
        spread = f"{wall:.1f} [{min(walls[workers]):.1f}-{max(walls[workers]):.1f}]"
        print(f"{workers:>7}  {units[workers]:>5}  {spread:>18}  {cpu:7.1f}  "
              f"{rates[workers]:12.0f}  {units[workers] / max(cpu, 1e-9) * 3600:11.0f}")
    per_run = [walls[1][r] / walls[2][r] for r in range(repeats)]
    print(f"parallel efficiency with 2 workers: {rates[2] / rates[1] / 2:.2f} (speed-up "
          f"{rates[2] / rates[1]:.2f}x from the medians; per alternated pair "
          f"{', '.join(f'{x:.2f}x' for x in per_run)}); rankings identical: {len(tables) == 1}")


def halving_vs_full(root: Path, data: str, epochs: int, base_epochs: int, sample: int | None,
                    workers: int) -> None:
    print(f"\nsuccessive halving vs --full: {data}, R = {epochs} epochs (rungs from "
          f"{base_epochs}), eta = 3, 3 folds, {'all' if sample is None else sample} "
          f"candidates, {workers} workers")
    common = dict(data=data, top_epochs=epochs, base_epochs=base_epochs, max_candidates=sample)
    sh, sh_wall = _run(root / "halving", workers, **common)
    full, full_wall = _run(root / "full", workers, full=True, **common)
    print(f"{'run':>8}  {'units':>5}  {'epochs':>6}  {'CPU s':>8}  {'wall s':>7}")
    for name, s, wall in (("halving", sh, sh_wall), ("full", full, full_wall)):
        print(f"{name:>8}  {s.outcome.units_run:>5}  {s.outcome.epochs:>6}  "
              f"{s.outcome.cpu_s:8.1f}  {wall:7.1f}")
    print(f"CPU ratio halving / full: {sh.outcome.cpu_s / full.outcome.cpu_s:.3f}")
    pick = sh.table[sh.table["pick"]].iloc[0]
    ft = full.table.set_index("candidate")
    best = full.table[full.table["finalist"]].sort_values(
        ["acc_mean", "params"], ascending=[False, True]).iloc[0]
    got = ft.loc[pick.candidate]
    within = got.acc_mean >= best.acc_mean - best.acc_se - 1e-12
    print(f"halving pick (one-SE): {pick.candidate}, {int(pick.params):,} params; "
          f"in the full run {got.acc_mean:.3f} ± {got.acc_se:.3f}")
    print(f"full run's best: {best.candidate}, {best.acc_mean:.3f} ± {best.acc_se:.3f}; "
          f"full run's own pick: {full.table[full.table['pick']].iloc[0].candidate}")
    print(f"pick within one SE of the full best: {'yes' if within else 'no'} "
          f"(threshold {best.acc_mean - best.acc_se:.3f})")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="small data, few candidates")
    parser.add_argument("--part", choices=("all", "throughput", "sh", "fixed", "budget"),
                        default="all")
    parser.add_argument("--keep", default=None, metavar="DIR",
                        help="keep the run folders in DIR (must be new or empty)")
    parser.add_argument("--candidates", type=int, default=None, metavar="N",
                        help="sample N candidates of the space for part 2 (default: all)")
    parser.add_argument("--epochs", type=int, default=None, metavar="R",
                        help="final epochs R for part 2 (default: the demo's)")
    parser.add_argument("--base-epochs", type=int, default=None, metavar="N",
                        help="shortest rung for part 2 (default: the demo's)")
    parser.add_argument("--throughput-candidates", type=int, default=None, metavar="N",
                        help="candidates of part 1 (default 40; 4 with --quick)")
    parser.add_argument("--throughput-epochs", type=int, default=None, metavar="E",
                        help="epochs per unit in part 1 (default 27; 2 with --quick)")
    parser.add_argument("--repeats", type=int, default=2, metavar="R",
                        help="runs of each worker count in part 1, alternated (default 2)")
    parser.add_argument("--fixed-candidates", type=int, default=None, metavar="N",
                        help="candidates of the fixed-cost and budget parts (default 12; "
                             "4 with --quick)")
    parser.add_argument("--search-option", action="append", default=[], metavar="OPT",
                        help="one more 'tinyconv search' option for the fixed-cost and "
                             "budget parts (repeatable, e.g. --search-option=--report=later)")
    parser.add_argument("--lr", type=float, default=None,
                        help="learning rate of every unit (default: the demo's)")
    args = parser.parse_args(argv)
    if args.lr is not None:
        LR.append(args.lr)
    from tinyconv.workflows.demo import FULL, QUICK
    demo = QUICK if args.quick else FULL
    data, sample, epochs, base_epochs = (demo["data"], demo["max_candidates"],
                                        demo["top_epochs"], demo["base_epochs"])
    # The demo's 40 candidates at its final 27 epochs: 120 units, about a
    # minute of CPU on a 2-core machine of 2026, the size of a real search, in
    # which the once-per-run worker start-up (about 1 s: imports and Numba's
    # first kernel loads, paid in wall time whatever the worker count) is small.
    t_sample, t_epochs = (4, 2) if args.quick else (40, 27)
    t_sample = args.throughput_candidates or t_sample
    t_epochs = args.throughput_epochs or t_epochs
    sample = args.candidates if args.candidates is not None else sample
    epochs = args.epochs if args.epochs is not None else epochs
    base_epochs = args.base_epochs if args.base_epochs is not None else base_epochs
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"machine: {os.cpu_count()} cores, load average {load:.1f} at the start "
          "(wall-clock figures mean little when it exceeds the core count)")
    root = Path(args.keep) if args.keep else Path(tempfile.mkdtemp(prefix="tc-bench-"))
    root.mkdir(parents=True, exist_ok=True)
    if any(root.iterdir()):
        print(f"error: {root} is not empty; give a new folder to --keep", file=sys.stderr)
        return 2
    try:
        if args.part in ("all", "throughput"):
            throughput(root, data, t_sample, t_epochs, 1 if args.quick else args.repeats)
        if args.part in ("all", "sh"):
            halving_vs_full(root, data, epochs, base_epochs, sample, workers=2)
        f_sample = args.fixed_candidates or (4 if args.quick else 12)
        extra = [*args.search_option, *(["--lr", str(args.lr)] if args.lr else [])]
        if args.part in ("all", "fixed"):
            _fixed_cost.fixed_cost(root, data, f_sample, 2 if args.quick else 3,
                                   1 if args.quick else args.repeats, extra)
        if args.part in ("all", "budget"):
            _fixed_cost.budgeted_vs_exhaustive(root, data, f_sample, epochs, base_epochs, 2,
                                               extra)
    finally:
        if not args.keep:
            shutil.rmtree(root, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
