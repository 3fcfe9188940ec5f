"""Retrain a run's chosen candidate on all its data and export it (``tinyconv export``).

Reads the run folder a search wrote, chooses a candidate from its ranking
(:class:`search.ranking.Ranking`: the one-SE pick, the best or a named one),
retrains it on all the data (the search's training settings with the
candidate's own recipe; the epochs of its final rung unless told otherwise),
quantises it to int8 and writes the files of :func:`tinyconv.export.export_network`.
The ``export`` and ``demo`` commands call :func:`export_run`.
"""

from __future__ import annotations

from pathlib import Path
from typing import Callable

import numpy as np

from search.ranking import Ranking
from tinyconv import fmt

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
    ranking = Ranking(table)
    if pick == "one-se":
        row = ranking.pick
    elif pick == "best":
        row = ranking.best
    else:
        row = ranking.row(pick)
        if row is None:
            shown = ", ".join(table["candidate"].head(5))
            raise RunError(f"--pick {pick!r} is not a ranked candidate of {run_dir}; give "
                           f"one-se, best or one of the ranked candidates, e.g. {shown}")
    return row.to_dict()


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
    from search.config import SIMPLEST_BY
    from search.rank import rank_run
    from search.recipes import arch_of, recipe_of, training_for
    from search.schedule import derive_seed
    from search.store import RunStore
    from tinyconv.arch import parse
    from tinyconv.checks import whole_number
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
    whole_number(calib, "calibration images", low=1, fix="give --calib N")
    with RunStore(run_dir) as store:
        settings = store.settings()
        row = choose(rank_run(store), pick, run_dir)
    candidate = str(row["candidate"])
    epochs = int(epochs if epochs is not None else row["epochs"])

    data = load_data(settings.data, skip_bad=settings.skip_bad)
    if fingerprint(data) != settings.fingerprint:
        raise RunError(f"the data {settings.data!r} changed since the search in {run_dir} "
                       f"(fingerprint {fingerprint(data)} instead of {settings.fingerprint}); "
                       "export needs the data the search ranked on")
    arch = parse(arch_of(candidate))
    x = prepare(data.images, arch.input)                 # (n, h, w, c) float32 in [0, 1]
    mean, std = fit_normalisation(x)                     # all the data: nothing is held out
    seed = settings.seed
    # early stopping needs held-out data, which a retrain on everything has not
    training = {k: v for k, v in training_for(settings, candidate).items() if k != "patience"}
    config = TrainConfig(epochs=epochs, seed=derive_seed(seed, "export", candidate, "batches"),
                         **training)
    net = Network.from_arch(arch, settings.n_classes, seed=derive_seed(seed, "export", candidate,
                                                              "weights"))
    recipe = recipe_of(settings, candidate)
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
            "recipe": recipe, "simplest_by": settings.simplest_by or SIMPLEST_BY,
            "epochs": epochs, "data": settings.data, "fingerprint": settings.fingerprint,
            "training": training,
            "cv_acc_mean": float(row["acc_mean"]), "cv_acc_se": float(row["acc_se"]),
            "final_train_acc": float(hist.train_acc[-1])}
    # the device runs images held out of the calibration sample (all were trained on)
    rest = np.setdiff1d(np.arange(len(pixels)), chosen)
    pool = rest if len(rest) else chosen
    on_device = pixels[np.sort(rng.choice(pool, size=min(device_images, len(pool)),
                                          replace=False))]
    return export_network(net, mean, std, pixels[chosen], out_dir, prefix=prefix,
                          classes=list(settings.classes), eval_images=pixels,
                          eval_labels=data.labels, eval_set="training (all)", meta=meta,
                          cv_accuracy=(float(row["acc_mean"]), float(row["acc_se"])),
                          core=device, clock_mhz=clock_mhz, device_images=on_device, log=log)
