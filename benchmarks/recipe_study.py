"""Which training recipe should the search use by default? Measured, cross-validated.

Usage::

    python benchmarks/recipe_study.py --batches 32     # schedule x lr x epochs, +- augmentation
    python benchmarks/recipe_study.py --batches 16,32 --rates 0.002,0.005,0.01 \
        --schedules constant,cosine --epochs 27 --no-augment   # batch size x lr
    python benchmarks/recipe_study.py --quick          # a smoke run: one cell per data set
    python benchmarks/recipe_study.py --csv study.csv  # also every fold's figures

For each data set (the built-in tiles of the demo and scikit-learn's bundled
digits), one network, and every cell of learning-rate schedule x learning
rate x batch size x epochs, without augmentation and (unless
``--no-augment``) with it (``--copies`` copies of each image per epoch), the
script runs
``tinyconv search --full`` on that one candidate (in this process, through
:func:`search.session.run_search`, so the figures are exactly those of the
command) with 3 stratified folds, for each run seed given (each seed draws
other folds, initial weights and batch orders). It prints one Markdown table
per data set: mean held-out accuracy over all folds of all seeds with its
standard error (over those folds), and the training-minus-held-out gap
(training accuracy measured after training, on un-augmented images).

Augmentation is the one that keeps each data set's labels true: for tiles
(a mark seen in any orientation) shifts by up to 2 pixels, both flips and
quarter turns; for digits (a flipped or turned digit can change its class)
shifts by up to 1 pixel only.

Everything else is the search's default (Adam, no weight decay).
The machine is shared: the CPU seconds printed are for orientation only.
"""

from __future__ import annotations

import argparse
import itertools
import math
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

# This folder holds scripts named like nothing of the package, but keep it off the
# path anyway so that the installed (or worktree) package is what is measured.
_HERE = Path(__file__).resolve().parent
sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != _HERE]

#: data set -> (data spec, architecture, the augmentation that keeps its labels)
STUDIES = {
    "tiles": ("builtin:tiles?n=80&size=32&seed=0", "16x16gray/c32k3-p2-c32k3-p2-c32k3-p2-gap",
              "shift2+mirror+upend+turn"),
    "digits": ("builtin:digits", "8x8gray/c16k3-p2-c32k3-p2-gap", "shift1"),
}
SCHEDULES = ("constant", "step", "cosine")
RATES = (0.001, 0.003, 0.01)
EPOCHS = (9, 27, 81)


def one_candidate_space(arch: str) -> str:
    """A space file whose only candidate is ``arch`` (given as an input spec and layers)."""
    spec, _, layers = arch.partition("/")
    return f'[input]\nspecs = ["{spec}"]\n' + _stages(layers)


def _stages(layers: str) -> str:
    """The [stages] and [head] tables of a plain conv-pool stack with a gap head."""
    convs = [t for t in layers.split("-") if t.startswith("c")]
    widths = [int(t[1:t.index("k")]) for t in convs]
    return (f"[stages]\ncount = [{len(widths)}]\nwidths = [{widths}]\nkernel = [3]\n"
            'pool = ["max"]\n[head]\nkind = ["gap"]\n')


def run_cell(data: str, arch: str, seed: int, epochs: int, training: dict) -> dict:
    """One ``search --full`` of one candidate; per-fold held-out and training accuracy."""
    from search.session import SearchRequest, run_search
    from search.store import RunStore

    with tempfile.TemporaryDirectory() as tmp:
        summary = run_search(SearchRequest(
            data=data, space=one_candidate_space(arch), out=Path(tmp) / "run", folds=3,
            seed=seed, top_epochs=epochs, full=True, workers=0, training=training))
        row = summary.table.iloc[0]
        assert row["candidate"].split(" ")[0] == arch, row["candidate"]
        with RunStore(Path(tmp) / "run") as store:
            units = store.units(status="done")
            # held-out accuracy per fold, counted from the stored predictions
            p = store.predictions(row["candidate"])
        held = (p["pred"] == p["label"]).groupby(p["fold"]).mean()
        return {"val": held.to_numpy(float), "train": units.sort_values("fold")["train_acc"]
                .to_numpy(float), "cpu_s": float(units["cpu_s"].sum())}


def _mean_se(values: np.ndarray) -> tuple[float, float]:
    return float(values.mean()), float(values.std(ddof=1) / math.sqrt(values.size))


def study(name: str, seeds: list[int], schedules, rates, batches, epochs, copies: int,
          augmented: bool, csv_rows: list) -> list[str]:
    """The Markdown table of one data set."""
    data, arch, augment = STUDIES[name]
    kinds = [("none", 1)] + ([(augment, copies)] if augmented else [])
    head = "| schedule | lr | batch | epochs | held-out, none | gap, none |"
    if augmented:
        head += " held-out, augmented | gap, augmented |"
    lines = [f"**{name}** (`{data}`, `{arch}`, 3 folds x {len(seeds)} run seed"
             f"{'s' if len(seeds) > 1 else ''}"
             + (f"; augmentation `{augment}`, {copies} cop{'y' if copies == 1 else 'ies'} "
                "per epoch)" if augmented else ")"), "",
             head + " CPU s |", "|---" * (head.count("|") - 1) + "|---|"]
    for schedule, lr, batch, ep in itertools.product(schedules, rates, batches, epochs):
        cells, cpu = [], 0.0
        for aug, n_copies in kinds:
            val, train = [], []
            for seed in seeds:
                r = run_cell(data, arch, seed, ep, {"lr": lr, "schedule": schedule,
                                                   "batch_size": batch, "augment": aug,
                                                   "copies": n_copies})
                val.append(r["val"])
                train.append(r["train"])
                cpu += r["cpu_s"]
                for f, (v, t) in enumerate(zip(r["val"], r["train"])):
                    csv_rows.append((name, schedule, lr, batch, ep, aug, n_copies, seed, f, v, t))
            v, t = np.concatenate(val), np.concatenate(train)
            m, se = _mean_se(v)
            cells += [f"{100 * m:.1f} ± {100 * se:.1f}", f"{100 * (t.mean() - m):.1f}"]
        lines.append(f"| {schedule} | {lr:g} | {batch} | {ep} | " + " | ".join(cells)
                     + f" | {cpu:.0f} |")
        print(lines[-1], file=sys.stderr, flush=True)
    return lines


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--data", default="tiles,digits", help="tiles, digits or both")
    parser.add_argument("--seeds", default="0,1", help="run seeds, comma-separated")
    parser.add_argument("--schedules", default=",".join(SCHEDULES))
    parser.add_argument("--rates", default=",".join(map(str, RATES)))
    parser.add_argument("--epochs", default=",".join(map(str, EPOCHS)))
    parser.add_argument("--batches", default="16", help="batch sizes, comma-separated")
    parser.add_argument("--copies", type=int, default=1,
                        help="copies of each image per epoch in the augmented runs")
    parser.add_argument("--no-augment", action="store_true",
                        help="leave out the runs with augmentation")
    parser.add_argument("--quick", action="store_true",
                        help="one cell per data set (constant, 0.005, 3 epochs, seed 0)")
    parser.add_argument("--csv", default=None, help="write every fold's figures here")
    args = parser.parse_args(argv)
    if args.quick:
        args.seeds, args.schedules, args.rates, args.epochs = "0", "constant", "0.005", "3"
    seeds = [int(s) for s in args.seeds.split(",")]
    rows: list = []
    start = time.perf_counter()
    for name in args.data.split(","):
        lines = study(name, seeds, args.schedules.split(","),
                      [float(r) for r in args.rates.split(",")],
                      [int(b) for b in args.batches.split(",")],
                      [int(e) for e in args.epochs.split(",")], args.copies,
                      not args.no_augment, rows)
        print("\n".join(lines) + "\n", flush=True)
    print(f"({time.perf_counter() - start:.0f} s wall in all)")
    if args.csv:
        with open(args.csv, "w", encoding="utf-8") as fh:
            fh.write("data,schedule,lr,batch,epochs,augment,copies,seed,fold,held_out_acc,"
                     "train_acc\n")
            fh.writelines(",".join(map(str, r)) + "\n" for r in rows)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
