"""The fixed cost of a search as a user pays it: whole ``tinyconv search`` processes.

Each search runs as its own ``python -m tinyconv search`` process; its CPU
seconds are that process's and its workers' (``resource.getrusage`` of the
children, user + system, taken before and after; on Linux the workers' fork
server is a child that the search waits for before it ends, and the server
waits for the workers it forked, so they count too), so imports, worker start-up,
the data preparation, the ranking and the report all count. The training CPU
is the sum of the units' own CPU seconds as the run store holds them. The
fixed cost is the difference: what a search costs beyond training its units.
"""

from __future__ import annotations

import os
import resource
import sqlite3
import subprocess
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent


@dataclass(frozen=True)
class Measured:
    """One whole search: its process CPU, its units' training CPU, wall seconds."""

    whole_cpu: float
    training_cpu: float
    wall: float
    units: int

    @property
    def fixed(self) -> float:
        return self.whole_cpu - self.training_cpu


def _children_cpu() -> float:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime + r.ru_stime


def cli_search(out: Path, data: str, workers: int, extra: list[str]) -> Measured:
    """Run ``tinyconv search`` on the demo space in a fresh process; what it cost."""
    cmd = [sys.executable, "-m", "tinyconv", "search", data, "--space", "builtin:demo",
           "--out", str(out), "--folds", "3", "--seed", "0", "--eta", "3",
           "--workers", str(workers), *extra]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    cpu0, wall0 = _children_cpu(), time.perf_counter()
    proc = subprocess.run(cmd, env=env, capture_output=True, text=True, check=False)
    wall, cpu = time.perf_counter() - wall0, _children_cpu() - cpu0
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(cmd)} exited {proc.returncode}:\n{proc.stderr[-2000:]}")
    with sqlite3.connect(f"file:{out / 'run.sqlite'}?mode=ro", uri=True) as db:
        training, units = db.execute("SELECT COALESCE(SUM(cpu_s), 0), COUNT(*) FROM units"
                                     ).fetchone()
    return Measured(cpu, float(training), wall, int(units))


#: What the fixed-cost and budget parts compare in one run: the search as it
#: comes, and with the report left for later.
VARIANTS = (("report written", []), ("--report-later", ["--report-later"]))


def fixed_cost(root: Path, data: str, sample: int, epochs: int, repeats: int,
               extra: list[str]) -> None:
    """Whole-process CPU minus training CPU with 1 and 2 workers, each variant, alternated."""
    print(f"\nfixed cost per search: 'tinyconv search' processes, --full, {sample} sampled "
          f"candidates x 3 folds, {epochs} epochs, {data}"
          + (f", {' '.join(extra)}" if extra else "")
          + f"; 1 and 2 workers and {len(VARIANTS)} variants alternated, {repeats} runs each, "
            "warm kernel cache; medians [min-max]")
    cli_search(root / "fixed_warm", data, 2, ["--full", "--top-epochs", "1",
                                               "--max-candidates", "2", *extra])
    runs: dict[tuple[str, int], list[Measured]] = {}
    for r in range(repeats):
        for name, options in VARIANTS:
            for workers in (1, 2):
                tag = f"{'later' if options else 'report'}_w{workers}_{r}"
                runs.setdefault((name, workers), []).append(cli_search(
                    root / f"fixed_{tag}", data, workers,
                    ["--full", "--top-epochs", str(epochs), "--max-candidates", str(sample),
                     *options, *extra]))
    print(f"{'variant':>15}  {'workers':>7}  {'units':>5}  {'whole CPU s':>11}  "
          f"{'training CPU s':>14}  {'fixed CPU s':>18}  {'wall s':>6}")
    for (name, workers), ms in runs.items():
        fixed = [m.fixed for m in ms]
        print(f"{name:>15}  {workers:>7}  {ms[0].units:>5}  "
              f"{np.median([m.whole_cpu for m in ms]):11.2f}  "
              f"{np.median([m.training_cpu for m in ms]):14.2f}  "
              f"{np.median(fixed):6.2f} [{min(fixed):.2f}-{max(fixed):.2f}]  "
              f"{np.median([m.wall for m in ms]):6.1f}")


def budgeted_vs_exhaustive(root: Path, data: str, sample: int, epochs: int, base_epochs: int,
                           workers: int, extra: list[str]) -> None:
    """A budgeted search at a third of the exhaustive run's training CPU, whole processes,
    for each variant."""
    common = ["--top-epochs", str(epochs), "--base-epochs", str(base_epochs),
              "--max-candidates", str(sample), *extra]
    print(f"\nbudgeted search vs exhaustive (whole 'tinyconv search' processes, {workers} "
          f"workers, {sample} candidates, R = {epochs}, rungs from {base_epochs}"
          + (f", {' '.join(extra)}" if extra else "") + ")")
    print(f"{'variant':>15}  {'run':>22}  {'units':>5}  {'whole CPU s':>11}  "
          f"{'training CPU s':>14}  {'fixed CPU s':>11}")
    for name, options in VARIANTS:
        tag = "later" if options else "report"
        full = cli_search(root / f"bud_full_{tag}", data, workers, ["--full", *options, *common])
        budget = full.training_cpu / 3
        cut = cli_search(root / f"bud_third_{tag}", data, workers,
                         ["--budget-cpu", f"{budget:.1f}s", *options, *common])
        for run, m in (("exhaustive (--full)", full), (f"--budget-cpu {budget:.1f}s", cut)):
            print(f"{name:>15}  {run:>22}  {m.units:>5}  {m.whole_cpu:11.2f}  "
                  f"{m.training_cpu:14.2f}  {m.fixed:11.2f}")
        print(f"{name:>15}  budgeted / exhaustive: training CPU "
              f"{cut.training_cpu / full.training_cpu:.3f}, whole-process CPU "
              f"{cut.whole_cpu / full.whole_cpu:.3f}")
