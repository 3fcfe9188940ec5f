"""One work unit: train a candidate on all folds but one, evaluate on that fold.

A unit is (candidate key, fold, rung, epochs) with a seed derived from the
run seed and those (:func:`search.schedule.unit_seed`, by the key's
architecture). The key is the architecture text, followed by the recipe when
the run has several (:mod:`search.recipes`). It trains from
scratch: the rung only says how many epochs. The normalisation statistics
come from the training part of the fold only. The unit raises only for a
lack of memory (not its own fault, so the search runs it again: see
:mod:`search.failures`): a problem in training becomes ``status="failed"``
with the message, a non-finite loss ``status="diverged"`` (with no accuracy
and no predictions, since the weights are not trustworthy).

The data reach a worker once, as :class:`UnitData` (raw uint8 images, labels,
fold of every image); images are prepared (resized, converted) for each input
spec once per worker and kept (:meth:`UnitData.prepared`).
"""

from __future__ import annotations

import json
import time
import traceback
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

DATA_FILES = ("images.npy", "labels.npy", "folds.npy")
#: calibration images for ``--int8``, spread evenly over the training part
CALIB_IMAGES = 256


@dataclass(frozen=True)
class UnitTask:
    """What to compute: train ``candidate`` for ``epochs``, hold out ``fold``.

    ``training`` holds the ``TrainConfig`` fields other than epochs and seed
    (the run's settings with the candidate's recipe over them);
    ``int8`` asks for the held-out accuracy of the int8 form as well.
    """

    candidate: str
    fold: int
    rung: int
    epochs: int
    seed: int
    n_classes: int
    training: tuple[tuple[str, Any], ...] = ()
    int8: bool = False

    @property
    def key(self) -> tuple[str, int, int]:
        """(candidate, fold, rung): the identity of a unit in a run."""
        return (self.candidate, self.fold, self.rung)


@dataclass(frozen=True)
class UnitResult:
    """What a unit gave.

    Attributes
    ----------
    task : UnitTask
    status : {"done", "diverged", "failed"}
    message : str
        Why it diverged or failed ("" when done).
    train_acc, train_loss, held_acc, held_loss : float or None
        After the last epoch, in evaluation mode, on the training part and the
        held-out fold (None unless done).
    cpu_s, wall_s : float
        CPU seconds of the worker process (``time.process_time``) and wall seconds.
    history : dict of str to list of float
        Per epoch: train_loss, train_acc (training mode), held_loss, held_acc.
    index : ndarray, shape (m,), int64
        Held-out images (indices into the data set), ascending.
    label, pred : ndarray, shape (m,), int64
    probs : ndarray, shape (m, K), float32
        Predicted class probabilities (empty unless done).
    int8_acc : float or None
        Held-out accuracy of the int8 quantised network (calibrated on the
        training part), when the task asked for it.
    """

    task: UnitTask
    status: str
    message: str = ""
    train_acc: float | None = None
    train_loss: float | None = None
    held_acc: float | None = None
    held_loss: float | None = None
    cpu_s: float = 0.0
    wall_s: float = 0.0
    history: dict = field(default_factory=dict)
    index: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    label: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    pred: np.ndarray = field(default_factory=lambda: np.zeros(0, np.int64))
    probs: np.ndarray = field(default_factory=lambda: np.zeros((0, 0), np.float32))
    int8_acc: float | None = None

    def history_json(self) -> str:
        return json.dumps(self.history, sort_keys=True)


class UnitData:
    """The data every unit of a run reads: raw images, labels, folds.

    Parameters
    ----------
    images : ndarray, shape (n, h, w, c), uint8
    labels : ndarray, shape (n,), int64
    folds : ndarray, shape (n,), int64
    """

    def __init__(self, images: np.ndarray, labels: np.ndarray, folds: np.ndarray):
        self.images = images
        self.labels = np.asarray(labels, dtype=np.int64)
        self.folds = np.asarray(folds, dtype=np.int64)
        self._prepared: dict[str, np.ndarray] = {}

    def __getstate__(self) -> dict:
        # Ship only the raw arrays; each worker prepares its own copies.
        return {"images": np.asarray(self.images), "labels": self.labels,
                "folds": self.folds}

    def __setstate__(self, state: dict) -> None:
        self.__init__(state["images"], state["labels"], state["folds"])

    def save(self, folder: str | Path) -> list[Path]:
        """Write the arrays as ``.npy`` files (read back memory-mapped).

        A file that already holds the same array is left alone, so a resumed
        run rewrites nothing it only reads. Each file is written whole or not
        at all (:func:`tinyconv.files.write_whole`); returns the files written.

        Raises
        ------
        tinyconv.errors.WriteError
            When a file cannot be written (full disk, read-only folder).
        """
        from tinyconv.files import write_whole

        folder = Path(folder)
        written = []
        for name, arr in zip(DATA_FILES, (self.images, self.labels, self.folds)):
            arr = np.ascontiguousarray(arr)
            if _holds(folder / name, arr):
                continue
            written.append(write_whole(folder / name, lambda fh, a=arr: np.save(fh, a),
                                       then="run the same search command again; finished "
                                            "units are kept in run.sqlite"))
        return written

    @staticmethod
    def load(folder: str | Path) -> "UnitData":
        folder = Path(folder)
        images, labels, folds = (np.load(folder / n, mmap_mode="r") for n in DATA_FILES)
        return UnitData(images, np.array(labels), np.array(folds))

    def prepared(self, spec) -> np.ndarray:
        """The images prepared for an ``InputSpec``, float32 in [0, 1] (cached)."""
        key = str(spec)
        if key not in self._prepared:
            from tinyconv.data import prepare
            self._prepared[key] = prepare(np.asarray(self.images), spec)
        return self._prepared[key]


def _holds(path: Path, arr: np.ndarray) -> bool:
    """Whether the ``.npy`` file at ``path`` holds exactly ``arr`` (False if unreadable)."""
    try:
        kept = np.load(path, mmap_mode="r")
    except (OSError, ValueError, EOFError):
        return False
    return kept.shape == arr.shape and kept.dtype == arr.dtype and bool(np.array_equal(kept, arr))


#: What :func:`warm_up` trains: a standard 3 x 3 layer on one channel (im2col),
#: one on 16 channels of an 8 x 8 map (F(4x4) Winograd in training, F(2x2) when
#: evaluating), pooling, one on a 4 x 4 map (F(2x2)), a depthwise and a pointwise
#: layer, batch norm, global pooling and a dense head: the kernels most
#: candidates call.
WARM_UP_ARCH = "8x8gray/c16k3-c16k3-p2-c16k3-dw3-c16k1-bn-gap-d8"


def warm_up() -> None:
    """Train and evaluate a small network once, so that Numba's kernels and its first-use
    machinery are loaded before the first unit: in the local workers' fork server
    (:mod:`search.warm_server`), whose workers share them, or in a spawned worker
    (about 0.5 CPU-s each); a worker forked from the warm server repeats it in a few
    milliseconds."""
    from tinyconv.network import Network
    from tinyconv.train import TrainConfig, evaluate, fit
    net = Network.from_arch(WARM_UP_ARCH, 2, seed=0)
    rng = np.random.default_rng(0)
    x = rng.standard_normal((8, 8, 8, 1)).astype(np.float32)
    y = np.arange(8) % 2
    for optimizer in ("adam", "sgd"):
        fit(net, x, y, TrainConfig(epochs=1, batch_size=4, optimizer=optimizer), x, y)
    evaluate(net, x, y)


#: Networks whose training and inference reach every kernel a unit can use: standard
#: convolution by im2col (few input channels; inner layers too, for the image
#: gradient's col2im, at strides 1 and 2), Winograd F(4x4) (training, maps of 8 x 8
#: and more, whole and ragged tiles) and F(2x2) (smaller maps; inference), depthwise
#: at strides 1 and 2, max,
#: average and global pooling, batch norm, dropout, a residual addition, dense layers.
PRIME_ARCHS = ("16x16gray/c16k3-c16k3-bn-p2-c16k3-a2-dw3-dw3s2-c16k3-x20-gap-d8",
               "20x20rgb/c16k3-c8k3s2-[c32k1-dw3-c8k1]-c16k3-c16k3-p2-c16k3-gap")


def prime_kernels() -> None:
    """Compile (or load) every kernel a unit can use, in this process.

    A search calls it before starting its worker processes when the kernel
    cache is cold (:func:`tinyconv.layers.kernel_cache.cold`), so the kernels are
    compiled once on the machine instead of once in every worker at the same
    time; the workers then load them from the cache.
    """
    from tinyconv.network import Network
    from tinyconv.train import TrainConfig, evaluate, fit
    rng = np.random.default_rng(0)
    for text in PRIME_ARCHS:
        net = Network.from_arch(text, 2, seed=0)
        h, w, c = net.arch.input.shape
        x = rng.standard_normal((8, h, w, c)).astype(np.float32)
        y = np.arange(8) % 2
        for optimizer in ("adam", "sgd"):
            fit(net, x, y, TrainConfig(epochs=1, batch_size=4, optimizer=optimizer), x, y)
        evaluate(net, x, y)


def run_unit(task: UnitTask, data: UnitData) -> UnitResult:
    """Train and evaluate one unit; raises only MemoryError (see the module notes)."""
    cpu0, wall0 = time.process_time(), time.perf_counter()
    try:
        return _run(task, data, cpu0, wall0)
    except MemoryError:
        raise  # the worker's memory, not the unit: the loop runs it again (search.failures)
    except Exception as exc:  # the unit reports it; the search goes on
        last = traceback.extract_tb(exc.__traceback__)[-1] if exc.__traceback__ else None
        where = f" (at {Path(last.filename).name}:{last.lineno})" if last else ""
        return UnitResult(task, "failed", f"{type(exc).__name__}: {exc}{where}",
                          cpu_s=time.process_time() - cpu0,
                          wall_s=time.perf_counter() - wall0)


def _run(task: UnitTask, data: UnitData, cpu0: float, wall0: float) -> UnitResult:
    from tinyconv import arch as arch_mod
    from tinyconv.data import normalise_fold
    from tinyconv.network import Network
    from tinyconv.losses import log_softmax
    from tinyconv.eval_batches import eval_batch
    from tinyconv.train import TrainConfig, evaluate, fit

    from search.folds import fold_split
    from search.recipes import arch_of
    from search.schedule import derive_seed

    arch = arch_mod.parse(arch_of(task.candidate))
    x_all = data.prepared(arch.input)                       # (n, h, w, c) float32
    train, held = fold_split(data.folds, task.fold)
    x_train, x_held, mean, std = normalise_fold(x_all, train, held)  # training part's statistics
    y_train, y_held = data.labels[train], data.labels[held]

    net = Network.from_arch(arch, task.n_classes, seed=derive_seed(task.seed, "weights"))
    config = TrainConfig(epochs=task.epochs, seed=derive_seed(task.seed, "batches"),
                         **dict(task.training))
    with np.errstate(over="ignore", invalid="ignore"):  # divergence is reported, not warned
        hist = fit(net, x_train, y_train, config, x_held, y_held)
    history = {"train_loss": list(hist.train_loss), "train_acc": list(hist.train_acc),
               "held_loss": list(hist.held_loss), "held_acc": list(hist.held_acc)}
    if hist.status == "diverged":
        return UnitResult(task, "diverged",
                          f"the training loss was not finite in epoch {hist.diverged_epoch} "
                          f"of {task.epochs}; try a smaller learning rate",
                          cpu_s=time.process_time() - cpu0,
                          wall_s=time.perf_counter() - wall0, history=history)
    train_loss, train_acc = evaluate(net, x_train, y_train)
    # One pass over the held-out fold gives the kept probabilities and its figures
    # (evaluate() keeps no probabilities, and sums its loss in float32 batch by batch).
    x_eval, step = x_held.astype(net.dtype, copy=False), eval_batch(net)
    logp = np.concatenate([log_softmax(net.forward(x_eval[i:i + step], training=False))
                           for i in range(0, x_eval.shape[0], step)])     # (m, K)
    pred = logp.argmax(axis=1).astype(np.int64)
    held_loss = float(-logp[np.arange(y_held.size), y_held].astype(np.float64).mean())
    held_acc = float(np.mean(pred == y_held))
    probs = np.exp(logp).astype(np.float32)
    int8_acc = None
    if task.int8:
        from tinyconv.quant import as_pixels, int8_accuracy
        calib = train[np.linspace(0, train.size - 1, min(CALIB_IMAGES, train.size)).astype(int)]
        int8_acc = int8_accuracy(net, mean, std, as_pixels(x_all[calib]),
                                 as_pixels(x_all[held]), y_held)
    return UnitResult(task, "done", "", float(train_acc), float(train_loss), float(held_acc),
                      float(held_loss), time.process_time() - cpu0,
                      time.perf_counter() - wall0, history, held.astype(np.int64),
                      y_held.astype(np.int64), pred, probs, int8_acc)
