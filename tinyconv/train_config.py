"""How to train one network: :class:`TrainConfig` and the checks of its values.

:func:`tinyconv.train.fit` reads it (see that module for what each setting
does to an epoch); ``tinyconv.train`` re-exports every name here.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

from tinyconv.augment import parse_augment
from tinyconv.checks import whole_number
from tinyconv.errors import InputError
from tinyconv.losses import check_smoothing

OPTIMISERS = ("adam", "sgd")
#: How weight decay enters (:mod:`tinyconv.optim`; kept here so that checking a
#: configuration does not import the optimisers' compiled kernels)
DECAY_KINDS = ("decoupled", "l2")
#: Learning-rate schedules (:func:`tinyconv.optim.learning_rate`)
SCHEDULES = ("constant", "step", "cosine")
#: The second word of the augmentation generator's seed (the first is ``config.seed``).
AUGMENT_STREAM = 1
#: The most copies of each image an epoch may pass over.
MAX_COPIES = 64


@dataclass(frozen=True)
class TrainConfig:
    """How to train one network.

    Attributes
    ----------
    epochs : int
        Passes over the training images (>= 1).
    batch_size : int
        Images per mini-batch (>= 1); batches are balanced in size.
    optimizer : {"adam", "sgd"}
        Adam, or SGD with heavy-ball momentum.
    lr : float
        Base learning rate (Adam's default 1e-3).
    momentum : float
        SGD momentum in [0, 1); ignored by Adam.
    weight_decay : float
        Decay of weight tensors (not biases or batch-norm parameters).
    decay : {"decoupled", "l2"}
        Decoupled decay, or an L2 penalty ``weight_decay / 2 * ||w||^2``.
    schedule : {"constant", "step", "cosine"}
        Learning-rate schedule over the epochs (see ``optim.learning_rate``).
    label_smoothing : float
        Label smoothing in [0, 1).
    patience : int or None
        Early-stopping patience in epochs (needs held-out data).
    seed : int
        Seed of the batch order (and of the augmentation's draws).
    augment : str
        Augmentation of the training batches in the text form of
        :mod:`tinyconv.augment` (``"none"``: none); kept in its canonical form.
    copies : int
        Copies of each training image an epoch passes over (>= 1; see the
        module notes), each augmented on its own.
    """

    epochs: int
    batch_size: int = 64
    optimizer: str = "adam"
    lr: float = 1e-3
    momentum: float = 0.9
    weight_decay: float = 0.0
    decay: str = "decoupled"
    schedule: str = "constant"
    label_smoothing: float = 0.0
    patience: int | None = None
    seed: int = 0
    augment: str = "none"
    copies: int = 1

    def __post_init__(self) -> None:
        # Type first, then value; numbers from NumPy or pandas are accepted and
        # stored as plain Python numbers so the repr and JSON stay simple.
        def need(ok: bool, message: str) -> None:
            if not ok:
                raise InputError(message)

        def store(name: str, value) -> None:
            object.__setattr__(self, name, value)

        for name in ("epochs", "batch_size", "patience", "seed", "copies"):
            value = getattr(self, name)
            if value is None and name == "patience":
                continue
            store(name, whole_number(value, name.replace("_", " ")))
        for name in ("lr", "momentum", "weight_decay", "label_smoothing"):
            value = getattr(self, name)
            need(isinstance(value, numbers.Real) and not isinstance(value, bool)
                 and math.isfinite(value),
                 f"{name.replace('_', ' ')} must be a finite number, got {value!r}")
            store(name, float(value))
        whole_number(self.epochs, "epochs", low=1)
        whole_number(self.batch_size, "batch size", low=1)
        whole_number(self.copies, "copies", low=1, high=MAX_COPIES,
                     fix="1 passes over each image once an epoch")
        need(self.optimizer in OPTIMISERS,
             f"optimizer {self.optimizer!r} is unknown; expected one of {', '.join(OPTIMISERS)}")
        need(self.lr > 0, f"learning rate must be a finite number > 0, got {self.lr!r}; try "
             "1e-3 for adam or 0.05 for sgd")
        need(0.0 <= self.momentum < 1.0, f"momentum must be in [0, 1), got {self.momentum!r}")
        need(self.weight_decay >= 0,
             f"weight decay must be a finite number >= 0, got {self.weight_decay!r}")
        need(self.decay in DECAY_KINDS,
             f"weight decay kind {self.decay!r} is unknown; expected one of "
             f"{', '.join(DECAY_KINDS)}")
        need(self.schedule in SCHEDULES,
             f"learning-rate schedule {self.schedule!r} is unknown; expected one of "
             f"{', '.join(SCHEDULES)}")
        check_smoothing(self.label_smoothing)
        need(self.patience is None or self.patience >= 1,
             f"patience must be None or an integer >= 1, got {self.patience!r}")
        store("augment", str(parse_augment(self.augment)))
