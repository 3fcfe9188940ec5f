"""The training loop: epochs of shuffled mini-batches, early stopping, divergence.

:func:`fit` trains a :class:`~tinyconv.network.Network` in place and returns a
:class:`History`. Everything random comes from ``config.seed`` (the batch
order) and from the network's own seed (initial weights, dropout masks), so
one seed gives bit-identical weights when run single-threaded.

Decisions, stated once:

* **Batches.** Each epoch draws a permutation of the images from a
  ``numpy.random.Generator`` seeded with ``config.seed`` (one generator for
  the whole run) and splits it into ``ceil(n / batch_size)`` batches whose
  sizes differ by at most one, so no tiny last batch upsets batch norm.
* **Reported training figures** are the means over the epoch's mini-batches
  of the data loss and accuracy in training mode (dropout on, batch
  statistics), weighted by batch size: free to compute, and common practice.
  The weight-decay penalty is not part of the reported loss.
* **Early stopping** (``patience`` set, needs held-out data): training stops
  when the held-out loss has not improved for ``patience`` epochs in a row
  (status ``"stopped"``). Whenever ``patience`` is set the network is left
  with the weights (and batch-norm statistics) of the epoch with the lowest
  held-out loss, ``History.best_epoch``; the held-out figures of that epoch
  are then an optimistic estimate, because they chose it.
* **Divergence.** A non-finite batch loss stops training at once:
  ``status = "diverged"``, ``diverged_epoch`` (1-based) says when, no further
  epoch runs, and the network is put back to its weights at the start of that
  epoch (the last finite ones), so no garbage weights are left behind. The
  epoch that diverged is not in the per-epoch tuples.
* ``on_epoch(epoch, stats)`` is called after every finished epoch with the
  1-based epoch and a dict of that epoch's figures; returning ``True`` stops
  training (status ``"stopped"``), e.g. for a time budget.
* **Augmentation** (``config.augment``, see :mod:`tinyconv.augment`) changes
  a copy of each training mini-batch, drawn from its own generator seeded
  with ``[config.seed, AUGMENT_STREAM]``, so adding it leaves the batch order
  as it was. The reported training figures are then those of the augmented
  batches; held-out images are never augmented.
* **Copies.** With ``config.copies = m``, an epoch passes over ``m`` copies of
  every training image, shuffled together (one permutation of ``m * n``
  items), so each copy is augmented with draws of its own; ``m = 1`` is the
  plain epoch. An epoch then costs ``m`` times as much.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tinyconv.augment import Augment, parse_augment
from tinyconv.errors import DataError, InputError
from tinyconv.eval_batches import eval_batch
from tinyconv.losses import log_softmax, softmax, softmax_cross_entropy
from tinyconv.optim import SGD, Adam, learning_rate
from tinyconv.train_config import (AUGMENT_STREAM, MAX_COPIES, OPTIMISERS,  # noqa: F401
                                   TrainConfig)


@dataclass(frozen=True)
class History:
    """What happened during :func:`fit`, one entry per finished epoch.

    Attributes
    ----------
    train_loss, train_acc : tuple of float
        Mean mini-batch data loss and accuracy (training mode).
    held_loss, held_acc : tuple of float
        Held-out loss and accuracy (evaluation mode); empty without held-out data.
    status : {"done", "stopped", "diverged"}
    diverged_epoch : int or None
        1-based epoch whose loss was not finite.
    best_epoch : int or None
        1-based epoch of the lowest held-out loss (None without held-out data).
    """

    train_loss: tuple[float, ...]
    train_acc: tuple[float, ...]
    held_loss: tuple[float, ...]
    held_acc: tuple[float, ...]
    status: str
    diverged_epoch: int | None = None
    best_epoch: int | None = None

    @property
    def epochs(self) -> int:
        """Number of finished epochs."""
        return len(self.train_loss)


def make_optimiser(net, config: TrainConfig) -> SGD | Adam:
    """The optimiser ``config`` asks for, over ``net.param_list()``."""
    params = net.param_list()
    if config.optimizer == "sgd":
        return SGD(params, momentum=config.momentum, weight_decay=config.weight_decay,
                   decay=config.decay)
    return Adam(params, weight_decay=config.weight_decay, decay=config.decay)


def check_arrays(net, x: np.ndarray, y: np.ndarray,
                 what: str = "training") -> tuple[np.ndarray, np.ndarray]:
    """Return ``x`` in the network's dtype and ``y`` as int64, after checking them.

    Raises
    ------
    DataError
        When shapes do not match the network's input, the counts differ, or a
        label is outside ``0..K-1``.
    """
    x = net.check_images(x, f"{what} images")
    y = np.asarray(y)
    if y.shape != (x.shape[0],):
        raise DataError(f"{what} labels have shape {y.shape} for {x.shape[0]} images; "
                        "give one integer label per image")
    if x.shape[0] == 0:
        raise DataError(f"{what} data is empty; give at least one image")
    if y.dtype.kind not in "iu":
        raise DataError(f"{what} labels must be integers, got dtype {y.dtype}")
    if y.min() < 0 or y.max() >= net.n_classes:
        raise DataError(f"{what} labels must be in 0..{net.n_classes - 1} for a network "
                        f"of {net.n_classes} classes, got values {y.min()}..{y.max()}")
    if not np.isfinite(x).all():
        raise DataError(f"{what} images contain NaN or infinite values; clean the data")
    return x, y.astype(np.int64, copy=False)


def _snapshot(net) -> list[np.ndarray]:
    """Copies of every parameter and state array, in a fixed order."""
    return [a.copy() for _, a in net.param_list()] + [a.copy() for _, a in net.state_list()]


def _restore(net, saved: list[np.ndarray]) -> None:
    """Write a snapshot back in place (the optimiser keeps its references)."""
    arrays = [a for _, a in net.param_list()] + [a for _, a in net.state_list()]
    for target, value in zip(arrays, saved):
        target[...] = value


def fit(net, x: np.ndarray, y: np.ndarray, config: TrainConfig,
        x_val: np.ndarray | None = None, y_val: np.ndarray | None = None,
        on_epoch: Callable[[int, dict], bool | None] | None = None) -> History:
    """Train ``net`` in place on ``(x, y)``.

    Parameters
    ----------
    net : Network
    x : ndarray, shape (n, h, w, c)
        Prepared, normalised images (cast to the network's dtype).
    y : ndarray, shape (n,), int in ``0..K-1``
    config : TrainConfig
    x_val, y_val : ndarray, optional
        Held-out images and labels, evaluated after every epoch.
    on_epoch : callable, optional
        ``on_epoch(epoch, stats) -> bool | None``; see the module notes.

    Returns
    -------
    History
    """
    x, y = check_arrays(net, x, y, "training")
    have_val = x_val is not None or y_val is not None
    if have_val:
        if x_val is None or y_val is None:
            raise InputError("give both held-out images and labels (x_val and y_val), or neither")
        x_val, y_val = check_arrays(net, x_val, y_val, "held-out")
    if config.patience is not None and not have_val:
        raise InputError(f"early stopping (patience={config.patience}) needs held-out data; "
                         "pass x_val and y_val, or set patience to None")

    augment = parse_augment(config.augment)
    augment.check_shape(x.shape[1], x.shape[2])
    rng = np.random.default_rng(config.seed)
    aug_rng = np.random.default_rng([config.seed, AUGMENT_STREAM])
    opt = make_optimiser(net, config)
    n = x.shape[0]
    items = n * config.copies                 # what one epoch passes over
    n_batches = -(-items // config.batch_size)
    logs: dict[str, list[float]] = {"train_loss": [], "train_acc": [], "held_loss": [],
                                    "held_acc": []}
    status, diverged_epoch = "done", None
    best_loss, best_epoch, best_weights, waited = math.inf, None, None, 0

    micro = micro_batch(net, config.batch_size)
    for epoch in range(config.epochs):
        lr = learning_rate(config.lr, epoch, config.epochs, config.schedule)
        start = _snapshot(net)
        # item i is a copy of image i % n (with one copy, the plain permutation)
        batches = np.array_split(rng.permutation(items) % n, n_batches)
        loss_sum, correct, finite = _train_epoch(net, x, y, batches, opt, lr,
                                                 config.label_smoothing, augment, aug_rng,
                                                 micro)
        if not finite:
            _restore(net, start)
            status, diverged_epoch = "diverged", epoch + 1
            break
        logs["train_loss"].append(loss_sum / items)
        logs["train_acc"].append(correct / items)
        stats = {"lr": lr, "train_loss": loss_sum / items, "train_acc": correct / items}
        stop = False
        if have_val:
            held_loss, held_acc = evaluate(net, x_val, y_val)
            if not math.isfinite(held_loss):
                # Finite on the training batches but not on held-out data: the
                # weights have blown up all the same.
                _restore(net, start)
                logs["train_loss"].pop()
                logs["train_acc"].pop()
                status, diverged_epoch = "diverged", epoch + 1
                break
            logs["held_loss"].append(held_loss)
            logs["held_acc"].append(held_acc)
            stats.update(held_loss=held_loss, held_acc=held_acc)
            if held_loss < best_loss:
                best_loss, best_epoch, waited = held_loss, epoch + 1, 0
                if config.patience is not None:
                    best_weights = _snapshot(net)
            else:
                waited += 1
                if config.patience is not None and waited >= config.patience:
                    status, stop = "stopped", True
        if on_epoch is not None and on_epoch(epoch + 1, stats) is True:
            status, stop = "stopped", True
        if stop:
            break

    if config.patience is not None and best_weights is not None and status != "diverged":
        _restore(net, best_weights)
    return History(tuple(logs["train_loss"]), tuple(logs["train_acc"]),
                   tuple(logs["held_loss"]), tuple(logs["held_acc"]), status,
                   diverged_epoch, best_epoch)


#: Activations a training step keeps for its backward pass (float32, summed over the
#: network's tensors), above which a batch is passed in parts: a part's tensors then
#: stay in the processor's cache between its forward and backward passes.
PART_BYTES = 24 << 20


def _has_batch_norm(net) -> bool:
    return any(getattr(layer, "kind", "") == "bn" for layer in net.layers)


def micro_batch(net, batch_size: int) -> int:
    """Images a training forward and backward pass take at once (``batch_size`` unless
    the batch's activations pass :data:`PART_BYTES`; never with batch norm, whose
    statistics are the whole batch's). The parts' gradients add up to the batch's."""
    if _has_batch_norm(net):
        return batch_size
    from tinyconv.cost import cost_of
    per_image = 4 * sum(r.live_elements for r in cost_of(net.arch, net.n_classes).rows)
    if per_image * batch_size <= PART_BYTES:
        return batch_size
    cap = max(1, PART_BYTES // per_image)
    # a divisor of the batch, so that every part has one shape (the layers' scratch
    # buffers are kept per shape); else parts as equal as they come
    divisor = max(d for d in range(1, cap + 1) if batch_size % d == 0)
    return divisor if 2 * divisor >= cap else -(-batch_size // -(-batch_size // cap))


def train_step(net, batch: np.ndarray, labels: np.ndarray, opt, lr: float,
               smoothing: float = 0.0, micro: int | None = None) -> tuple[float, int]:
    """One optimiser step on ``batch``; returns (mean loss, images classified right).

    A batch of more than ``micro`` images goes forward and backward in parts of
    at most ``micro`` (:func:`micro_batch`), each part's gradient of its mean
    loss weighted by its share of the batch, and one update follows with their
    sum: the batch's gradient. A non-finite loss returns at once, before any
    update. A network with batch norm always takes the whole batch (its
    statistics are the batch's), whatever ``micro`` says.
    """
    n, total, loss_sum, correct = len(batch), None, 0.0, 0
    if micro is not None and micro < n and _has_batch_norm(net):
        micro = None
    for at in range(0, n, micro or n):
        part = slice(at, min(at + (micro or n), n))
        logits = net.forward(batch[part], training=True)        # (m, K)
        loss, grad = softmax_cross_entropy(logits, labels[part], smoothing)
        if not math.isfinite(loss):
            return loss, correct
        m = len(logits)
        if m < n:
            grad *= m / n
        net.backward(grad, input_grad=False)  # the images need no gradient
        grads = [g for _, g in net.grad_list()]
        if m == n:
            total = grads
        elif total is None:
            total = [g.copy() for g in grads]
        else:
            for t, g in zip(total, grads):
                t += g
        loss_sum += loss * m
        correct += int((logits.argmax(axis=1) == labels[part]).sum())
    opt.update(total, lr)
    return loss_sum / n, correct


def _train_epoch(net, x: np.ndarray, y: np.ndarray, batches: list[np.ndarray], opt,
                 lr: float, smoothing: float, augment: Augment | None = None,
                 aug_rng: np.random.Generator | None = None,
                 micro: int | None = None) -> tuple[float, int, bool]:
    """One pass over ``batches`` (index arrays); returns (loss sum, correct, finite).

    With ``augment``, each batch (a copy: ``x[idx]``) is augmented with draws from
    ``aug_rng`` before the forward pass; :func:`train_step` does the rest.
    """
    loss_sum, correct = 0.0, 0
    # Overflow on the way to a non-finite loss is detected here and reported as
    # divergence, so NumPy's warnings about it would only add noise.
    with np.errstate(over="ignore", invalid="ignore"):
        for idx in batches:
            batch = x[idx]                                       # (b, h, w, c), a copy
            if augment:
                batch = augment(batch, aug_rng)
            loss, right = train_step(net, batch, y[idx], opt, lr, smoothing, micro)
            if not math.isfinite(loss):
                return loss_sum, correct, False
            loss_sum += loss * len(idx)
            correct += right
    return loss_sum, correct, True


def predict_proba(net, x: np.ndarray, batch: int | None = None) -> np.ndarray:
    """Class probabilities in evaluation mode, ``batch`` images at a time.

    Parameters
    ----------
    net : Network
    x : ndarray, shape (n, h, w, c)
    batch : int, optional
        :func:`eval_batch` when omitted.

    Returns
    -------
    ndarray, shape (n, K), rows summing to 1.
    """
    x = np.asarray(x, dtype=net.dtype)
    batch = batch or eval_batch(net)
    out = np.empty((x.shape[0], net.n_classes), dtype=net.dtype)
    for i in range(0, x.shape[0], batch):
        out[i:i + batch] = softmax(net.forward(x[i:i + batch], training=False))
    return out


def evaluate(net, x: np.ndarray, y: np.ndarray, batch: int | None = None
             ) -> tuple[float, float]:
    """Mean cross-entropy (no smoothing) and accuracy in evaluation mode.

    Parameters
    ----------
    net : Network
    x : ndarray, shape (n, h, w, c)
    y : ndarray, shape (n,), int
    batch : int, optional
        :func:`eval_batch` when omitted.

    Returns
    -------
    (loss, accuracy) : tuple of float
    """
    x = np.asarray(x, dtype=net.dtype)
    y = np.asarray(y)
    n = x.shape[0]
    batch = batch or eval_batch(net)
    loss_sum, correct = 0.0, 0
    for i in range(0, n, batch):
        logits = net.forward(x[i:i + batch], training=False)
        logp = log_softmax(logits)                             # (b, K)
        loss_sum -= float(logp[np.arange(logits.shape[0]), y[i:i + batch]].sum())
        correct += int((logits.argmax(axis=1) == y[i:i + batch]).sum())
    return loss_sum / n, correct / n
