"""What a larger input costs a search unit: 32 x 32 against 64 x 64 with the same layers.

Usage::

    python benchmarks/sizes.py            # 7 repeats, 40 tiles a class
    python benchmarks/sizes.py --quick    # 2 repeats, 8 tiles a class (checks the machinery)

One process, one thread (BLAS limited like a search worker); everything
interleaved, CPU seconds of this process (``time.process_time``):

1. **Units**: ``search.unit.run_unit`` (3 epochs, fold 0 of 3, the search's
   default recipe) on the demo's tiles drawn at 32 x 32 and at 64 x 64, for
   each network's layers: median CPU per unit, the 64/32 ratio beside the
   MACs ratio (4x), and the peak of Python-tracked memory of a unit per
   image (``tracemalloc``: the unit's copies, not the shared prepared images).
2. **Evaluation batches**: per-image microseconds of an evaluation-mode
   forward at batches of 32 and 256 and at the batch the engine picks
   (``tinyconv.eval_batches.eval_batch``, when it exists).
3. **Normalisation statistics**: ``fit_normalisation`` on 2,000 prepared
   64 x 64 colour images against the whole-float64-copy formula it must
   equal bit for bit: CPU seconds, peak tracked memory, and whether the
   results are identical.

The machine is shared: compare figures within one run only.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]

LAYERS = ("c8k3-p2-c16k3-p2-gap", "c16k3-p2-c32k3-p2-gap", "c8k3-p2-dw3-c16k1-p2-gap")
TRAINING = (("batch_size", 16), ("lr", 0.005), ("optimizer", "adam"))


def _data(size: int, per_class: int):
    from search.folds import assign_folds
    from search.unit import UnitData
    from tinyconv.data import load_data
    ds = load_data(f"builtin:tiles?n={per_class}&size={size}&seed=0")
    return UnitData(ds.images, ds.labels, assign_folds(ds.labels, 3, 0))


def units(repeats: int, per_class: int) -> None:
    from search.unit import UnitTask, run_unit
    from tinyconv.cost import cost_of
    from tinyconv.arch import parse
    datas = {s: _data(s, per_class) for s in (32, 64)}
    n = datas[32].labels.size
    print(f"1. units: run_unit, 3 epochs, fold 0 of 3, {n} tiles, batch 16, adam; median of "
          f"{repeats} [min-max], interleaved")
    print(f"  {'layers':<28}{'32x32 CPU s':>20}{'64x64 CPU s':>20}{'ratio':>7}{'MACs':>6}"
          f"{'KB/img 32':>10}{'KB/img 64':>10}")
    for layers in LAYERS:
        cpu: dict[int, list[float]] = {32: [], 64: []}
        peak: dict[int, float] = {}
        for rep in range(repeats + 1):
            for size in (32, 64):
                task = UnitTask(f"{size}x{size}rgb/{layers}", 0, 0, 3, 0, 8, TRAINING)
                if rep == 0:  # warm: kernels, prepared images; then the memory peak
                    run_unit(task, datas[size])
                    tracemalloc.start()
                    run_unit(task, datas[size])
                    peak[size] = tracemalloc.get_traced_memory()[1] / n / 1024
                    tracemalloc.stop()
                    continue
                result = run_unit(task, datas[size])
                assert result.status == "done", result.message
                cpu[size].append(result.cpu_s)
        macs = {s: cost_of(parse(f"{s}x{s}rgb/{layers}"), 8).macs for s in (32, 64)}
        med = {s: float(np.median(v)) for s, v in cpu.items()}
        cells = [f"{med[s]:.3f} [{min(cpu[s]):.3f}-{max(cpu[s]):.3f}]" for s in (32, 64)]
        print(f"  {layers:<28}{cells[0]:>20}{cells[1]:>20}{med[64] / med[32]:7.2f}"
              f"{macs[64] / macs[32]:6.1f}{peak[32]:10.1f}{peak[64]:10.1f}")


def eval_batches(repeats: int) -> None:
    from tinyconv.network import Network
    try:
        from tinyconv.eval_batches import eval_batch as pick
    except ImportError:  # an engine from before evaluation batches were picked
        pick = None
    print("\n2. evaluation forward, microseconds per image (512 images), median of "
          f"{repeats}; 'picked' = tinyconv.eval_batches.eval_batch")
    print(f"  {'network':<34}{'batch 32':>10}{'batch 256':>10}{'picked':>14}{'256/32':>8}")
    for layers in LAYERS:
        for size in (32, 64):
            net = Network.from_arch(f"{size}x{size}rgb/{layers}", 8, seed=0)
            x = np.random.default_rng(0).standard_normal((512, size, size, 3)).astype(np.float32)
            batches = {32: 32, 256: 256}
            if pick is not None:
                batches["picked"] = pick(net)
            times: dict = {k: [] for k in batches}
            for rep in range(repeats + 1):
                for key, b in batches.items():
                    t = time.process_time()
                    for i in range(0, 512, b):
                        net.forward(x[i:i + b], training=False)
                    if rep:
                        times[key].append((time.process_time() - t) / 512 * 1e6)
            med = {k: float(np.median(v)) for k, v in times.items()}
            picked = f"{med['picked']:.1f} (b {batches['picked']})" if pick else "-"
            print(f"  {f'{size}x{size}rgb/{layers}':<34}{med[32]:10.1f}{med[256]:10.1f}"
                  f"{picked:>14}{med[256] / med[32]:8.2f}")


def statistics(repeats: int, images: int) -> None:
    from tinyconv.data import fit_normalisation
    x = np.random.default_rng(0).random((images, 64, 64, 3), dtype=np.float32)

    def whole_copy():  # the formula the engine must reproduce, on one float64 copy
        flat = x.reshape(-1, 3).astype(np.float64)
        return (flat.mean(axis=0).astype(np.float32),
                np.maximum(flat.std(axis=0), 1e-3).astype(np.float32))

    print(f"\n3. normalisation statistics of {images} prepared 64x64 colour images "
          f"({x.nbytes / 2**20:.0f} MiB float32), median of {repeats}")
    results = {}
    for name, fn in (("whole float64 copy", whole_copy), ("fit_normalisation", lambda: fit_normalisation(x))):
        secs = []
        for _ in range(repeats):
            t = time.process_time()
            results[name] = fn()
            secs.append(time.process_time() - t)
        tracemalloc.start()
        fn()
        peak = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
        print(f"  {name:<20} {np.median(secs):6.3f} CPU s, peak {peak:7.1f} MiB tracked")
    same = all(np.array_equal(a, b) for a, b in zip(*results.values()))
    print(f"  mean and std identical bit for bit: {same}")


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="2 repeats, few tiles")
    parser.add_argument("--repeats", type=int, default=7, metavar="R")
    args = parser.parse_args(argv)
    from search.executors import limit_threads
    limit_threads()
    repeats = 2 if args.quick else args.repeats
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"input sizes, 1 thread; load average {load:.1f} on {os.cpu_count()} cores at the "
          "start")
    units(repeats, 8 if args.quick else 40)
    eval_batches(repeats)
    statistics(repeats, 200 if args.quick else 2000)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
