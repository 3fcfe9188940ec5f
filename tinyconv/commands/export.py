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
from typing import Callable

import numpy as np

from tinyconv import fmt
from tinyconv.commands._args import add_device_options, positive_int

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
        from tinyconv.commands.search import write_report_if_available
        state, text = write_report_if_available(Path(args.run_dir))
        print(f"report: {text}", file=sys.stdout if state == "written" else sys.stderr)
        return 1 if state == "failed" else 0
    return 0


def epoch_lines(epochs: int, log: Callable[[str], None], each: bool = False):
    """An ``on_epoch`` hook that logs the retraining in a few lines (every epoch with
    ``each``): after each quarter of the epochs and after the last."""
    step = 1 if each else max(1, -(-epochs // 4))

    def on_epoch(epoch: int, stats: dict) -> None:
        if epoch % step == 0 or epoch == epochs:
            log(f"  {epoch} of {epochs} epochs: training loss {stats['train_loss']:.3f}, "
                f"{fmt.percent(stats['train_acc'])} of the training images right")
    return on_epoch


def choose(table, pick: str, run_dir) -> dict:
    """The ranking row of the chosen candidate, as a dict.

    Raises
    ------
    RunError
        When nothing is ranked yet or the candidate is not among the ranked.
    """
    from tinyconv.errors import RunError

    if table.empty:
        raise RunError(f"{run_dir}: no candidate has finished all folds of a rung yet, so "
                       "there is nothing to export; let the search run longer")
    if pick == "one-se":
        rows = table[table["pick"]]
    elif pick == "best":
        rows = table[table["finalist"]].sort_values(
            ["acc_mean", "params", "candidate"], ascending=[False, True, True]).head(1)
    else:
        rows = table[table["candidate"] == pick]
        if rows.empty:
            shown = ", ".join(table["candidate"].head(5))
            raise RunError(f"--pick {pick!r} is not a ranked candidate of {run_dir}; give "
                           f"one-se, best or one of the ranked candidates, e.g. {shown}")
    return rows.iloc[0].to_dict()


def export_run(run_dir, pick: str = "one-se", out_dir=None, epochs: int | None = None,
               calib: int = 256, prefix: str = "tc",
               log: Callable[[str], None] | None = None, core: str | None = None,
               clock_mhz: float | None = None, device_images: int = 16,
               each_epoch: bool = False):
    """Retrain a run's chosen candidate on all its data and export it.

    Parameters
    ----------
    run_dir : path
        A folder a search wrote (holds ``run.sqlite``).
    pick : str
        ``"one-se"`` (the ranking's pick), ``"best"`` (highest mean accuracy
        among the finalists) or a ranked candidate's architecture text.
    out_dir : path, optional
        Default ``run_dir/export``.
    epochs : int, optional
        Default: the epochs of the candidate's highest rung in the ranking.
    calib : int
        Calibration images (a seeded sample of the data; all when fewer).
    prefix : str
        C symbol prefix.
    log : callable, optional
        Receives progress lines.
    core : str, optional
        Also measure the exported C on this core under QEMU (``device.json``),
        on up to ``device_images`` images held out of the calibration sample.
    clock_mhz : float, optional
        The part's clock for the time figure.
    device_images : int
        Images for the device run.
    each_epoch : bool
        Log every epoch of the retraining, not just a few (:func:`epoch_lines`).

    Returns
    -------
    tinyconv.export.ExportSummary
        Its agreement and accuracies are measured on all the images, which the
        network was trained on (an export has no held-out part).

    Raises
    ------
    RunError
        For a folder without a usable run, an unknown pick, or data that
        changed since the search.
    DivergedError
        When the retraining produced a non-finite loss.
    """
    from search.rank import rank_run
    from search.recipes import arch_of, recipe_of, training_for
    from search.schedule import derive_seed
    from search.store import RunStore
    from tinyconv.arch import parse
    from tinyconv.data import fingerprint, fit_normalisation, load_data, normalise, prepare
    from tinyconv.errors import DivergedError, RunError
    from tinyconv.export import export_network
    from tinyconv.export.c_writer import check_prefix
    from tinyconv.network import Network
    from tinyconv.quant import as_pixels
    from tinyconv.train import TrainConfig, fit

    log = log or (lambda text: None)
    prefix = check_prefix(prefix)  # before any training
    device = None
    if core is not None:  # a bad core, clock or a missing toolchain before any training
        from tinyconv.device.cores import check_clock, core_named
        from tinyconv.device.toolchain import find_toolchain
        device = core_named(core)
        clock_mhz = check_clock(clock_mhz) if clock_mhz is not None else None
        find_toolchain()
    if isinstance(calib, bool) or not isinstance(calib, (int, np.integer)) or calib < 1:
        raise RunError(f"calibration images must be a whole number >= 1, got {calib!r}")
    with RunStore(run_dir) as store:
        cfg = store.config()
        row = choose(rank_run(store), pick, run_dir)
    candidate = str(row["candidate"])
    epochs = int(epochs if epochs is not None else row["epochs"])

    data = load_data(cfg["data"], skip_bad=bool(cfg.get("skip_bad", False)))
    if fingerprint(data) != cfg["fingerprint"]:
        raise RunError(f"the data {cfg['data']!r} changed since the search in {run_dir} "
                       f"(fingerprint {fingerprint(data)} instead of {cfg['fingerprint']}); "
                       "export needs the data the search ranked on")
    arch = parse(arch_of(candidate))
    n_classes = len(cfg["classes"])
    x = prepare(data.images, arch.input)                 # (n, h, w, c) float32 in [0, 1]
    mean, std = fit_normalisation(x)                     # all the data: nothing is held out
    seed = int(cfg.get("seed", 0))
    # early stopping needs held-out data, which a retrain on everything has not
    training = {k: v for k, v in training_for(cfg, candidate).items() if k != "patience"}
    config = TrainConfig(epochs=epochs, seed=derive_seed(seed, "export", candidate, "batches"),
                         **training)
    net = Network.from_arch(arch, n_classes, seed=derive_seed(seed, "export", candidate,
                                                              "weights"))
    recipe = recipe_of(cfg, candidate)
    log(f"retraining {arch} ({recipe}) on all {len(data.labels)} images for {epochs} epochs")

    on_epoch = epoch_lines(epochs, log, each_epoch)
    with np.errstate(over="ignore", invalid="ignore"):  # divergence is reported below
        hist = fit(net, normalise(x, mean, std), data.labels, config, on_epoch=on_epoch)
    if hist.status == "diverged":
        raise DivergedError(f"retraining {candidate} diverged in epoch {hist.diverged_epoch} "
                            f"of {epochs}; try a smaller learning rate or fewer epochs",
                            hist.diverged_epoch)

    # the device sees 8-bit pixels in the network's own size and colour mode
    pixels = as_pixels(x)
    rng = np.random.default_rng(derive_seed(seed, "export", candidate, "calibration"))
    chosen = np.sort(rng.choice(len(pixels), size=min(int(calib), len(pixels)), replace=False))
    out_dir = Path(out_dir) if out_dir is not None else Path(run_dir) / "export"
    log(f"quantising with {len(chosen)} calibration images; writing {out_dir}")
    meta = {"run": str(run_dir), "pick": pick, "candidate": candidate, "arch": str(arch),
            "recipe": recipe, "simplest_by": cfg.get("simplest_by") or "params", "epochs": epochs,
            "data": cfg["data"], "fingerprint": cfg["fingerprint"], "training": training,
            "cv_acc_mean": float(row["acc_mean"]), "cv_acc_se": float(row["acc_se"]),
            "final_train_acc": float(hist.train_acc[-1])}
    # the device runs images held out of the calibration sample (all were trained on)
    rest = np.setdiff1d(np.arange(len(pixels)), chosen)
    pool = rest if len(rest) else chosen
    on_device = pixels[np.sort(rng.choice(pool, size=min(device_images, len(pool)),
                                          replace=False))]
    return export_network(net, mean, std, pixels[chosen], out_dir, prefix=prefix,
                          classes=cfg["classes"], eval_images=pixels,
                          eval_labels=data.labels, eval_set="training (all)", meta=meta,
                          cv_accuracy=(float(row["acc_mean"]), float(row["acc_se"])),
                          core=device, clock_mhz=clock_mhz, device_images=on_device, log=log)
