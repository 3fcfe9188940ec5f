"""Time to enumerate a search space of about 10,000 candidates and filter it by budget.

Goal: under a second for both together on one core. Prints the figures (median,
min and max over the repeats) as wall-clock and as this process's CPU time (on
a shared machine the CPU time is the fairer figure); never part of the tests.

    python benchmarks/space.py [--repeats 5] [--classes 8]
"""

from __future__ import annotations

import argparse
import os
import statistics
import time

from search.space import enumerate_space, filter_budget, load_space

SPACE = """
description = "benchmark: about 10,000 candidates"
[input]
sizes = [16, 24, 32]
modes = ["rgb", "gray"]
[stages]
count = [0, 1, 2, 3]
filters = [4, 8, 16, 32]
kernel = [3]
conv = ["standard", "depthwise"]
pool = ["max", "avg", "stride"]
[head]
kind = ["gap", "flatten"]
hidden = [0, 32]
[options]
batch_norm = [false, true]
[budget]
max_params = 50000
max_macs = 1000000
max_peak_kb = 32
max_flash_kb = 256
"""


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=5)
    parser.add_argument("--classes", type=int, default=8)
    args = parser.parse_args()
    space = load_space(SPACE)
    walls: list[tuple[float, float]] = []
    cpus: list[tuple[float, float]] = []
    for _ in range(args.repeats):
        w0, c0 = time.perf_counter(), time.process_time()
        candidates = enumerate_space(space)
        w1, c1 = time.perf_counter(), time.process_time()
        result = filter_budget(candidates, space.budget, args.classes)
        w2, c2 = time.perf_counter(), time.process_time()
        walls.append((w1 - w0, w2 - w1))
        cpus.append((c1 - c0, c2 - c1))

    def show(name: str, xs: list[float]) -> None:
        print(f"  {name:<20} median {statistics.median(xs):6.3f} s   "
              f"min {min(xs):6.3f}   max {max(xs):6.3f}")

    print(f"space: {space.size_bound():,} combinations, {len(candidates):,} unique "
          f"candidates, {len(result.survivors):,} within budget")
    print(f"budget: {result.summary()}")
    for label, rows in (("wall clock", walls), ("CPU time", cpus)):
        print(label)
        show("enumerate", [a for a, _ in rows])
        show("filter by budget", [b for _, b in rows])
        show("enumerate + filter", [a + b for a, b in rows])
    both = statistics.median(a + b for a, b in cpus)
    print(f"per candidate: {both / len(candidates) * 1e6:.0f} us CPU; goal (< 1 s CPU for "
          f"both): {'met' if both < 1.0 else 'NOT met'}; load average "
          f"{os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")


if __name__ == "__main__":
    main()
