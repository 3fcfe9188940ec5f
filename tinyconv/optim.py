"""Optimisers (SGD with momentum, Adam) and learning-rate schedules.

An optimiser holds references to the parameter arrays of a network (the
arrays of ``Network.param_list()``) and updates them **in place**, so the
network sees every step without copying. Gradients come in the same order
(``Network.grad_list()``).

Weight decay applies to weight tensors only (parameter key ``w``); biases and
batch-norm scales and shifts are not decayed (common practice). Two kinds:

* ``"decoupled"``: ``theta -= lr * wd * theta`` with the value before the
  gradient step (Loshchilov & Hutter, "Decoupled Weight Decay
  Regularization", ICLR 2019, Algorithm 2);
* ``"l2"``: ``wd * theta`` is added to the gradient, i.e. the gradient of the
  penalty ``wd / 2 * ||theta||^2`` added to the loss.

For plain SGD without momentum the two coincide; with momentum or Adam they
differ.

Schedules are pure functions of the 0-based epoch index (see
:func:`learning_rate`).
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np
from numba import njit

from tinyconv.errors import InputError
from tinyconv.train_config import DECAY_KINDS, SCHEDULES


def _decayed(names: Sequence[str]) -> list[bool]:
    """Which tensors get weight decay: those whose key (after the last '/') is 'w'."""
    return [name.rsplit("/", 1)[-1] == "w" for name in names]


class _Optimiser:
    """Shared bookkeeping: the parameter arrays, decay settings, step count."""

    def __init__(self, params: Sequence[tuple[str, np.ndarray]], weight_decay: float,
                 decay: str) -> None:
        if decay not in DECAY_KINDS:
            raise InputError(f"weight decay kind {decay!r} is unknown; "
                             f"expected one of {', '.join(DECAY_KINDS)}")
        if not (weight_decay >= 0.0 and math.isfinite(weight_decay)):
            raise InputError(f"weight decay must be a finite number >= 0, got {weight_decay!r}")
        self.names = [name for name, _ in params]
        self.arrays = [array for _, array in params]
        self.weight_decay = float(weight_decay)
        self.decay = decay
        self.mask = _decayed(self.names)
        self.steps = 0

    def _gradients(self, grads: Sequence[np.ndarray]) -> list[np.ndarray]:
        """The gradients to use, with the L2 term added when ``decay == 'l2'``."""
        if len(grads) != len(self.arrays):
            raise ValueError(f"{len(grads)} gradients for {len(self.arrays)} parameters")
        if self.decay != "l2" or not self.weight_decay:
            return list(grads)
        wd = self.weight_decay
        return [g + wd * p if m else g for g, p, m in zip(grads, self.arrays, self.mask)]

    def _decouple(self, lr: float) -> None:
        """Decoupled decay: shrink each weight tensor by ``lr * wd`` of itself.

        Called before the gradient step; the L2 gradients are computed before
        it too, so both kinds use the parameters as they were.
        """
        if self.decay != "decoupled" or not self.weight_decay:
            return
        factor = 1.0 - lr * self.weight_decay
        for p, m in zip(self.arrays, self.mask):
            if m:
                p *= factor


class SGD(_Optimiser):
    """Stochastic gradient descent with heavy-ball momentum.

    Notes
    -----
    With velocity ``v`` (zero at the start), momentum ``mu`` and gradient
    ``g``: ``v = mu * v + g``; ``theta -= lr * v`` (Polyak 1964; the form
    common in practice). ``mu = 0`` is plain SGD.
    """

    def __init__(self, params: Sequence[tuple[str, np.ndarray]], momentum: float = 0.9,
                 weight_decay: float = 0.0, decay: str = "decoupled") -> None:
        super().__init__(params, weight_decay, decay)
        if not 0.0 <= momentum < 1.0:
            raise InputError(f"momentum must be in [0, 1), got {momentum!r}; 0.9 is usual")
        self.momentum = float(momentum)
        self.velocity = [np.zeros_like(p) for p in self.arrays]

    def update(self, grads: Sequence[np.ndarray], lr: float) -> None:
        """One step with learning rate ``lr``; parameters change in place."""
        self.steps += 1
        grads = self._gradients(grads)
        self._decouple(lr)
        for p, g, v in zip(self.arrays, grads, self.velocity):
            t = p.dtype.type  # scalars in the parameter's dtype: float32 stays float32
            if self.momentum:
                _sgd_momentum_kernel(_flat(p), _flat(g, p.dtype), _flat(v), t(self.momentum),
                                     t(lr))
            else:
                p -= lr * g


class Adam(_Optimiser):
    """Adam (Kingma & Ba, "Adam: A Method for Stochastic Optimization", ICLR 2015).

    Notes
    -----
    Step t (1-based), gradient ``g``::

        m = beta1 m + (1 - beta1) g
        v = beta2 v + (1 - beta2) g^2
        theta -= lr * (m / (1 - beta1^t)) / (sqrt(v / (1 - beta2^t)) + eps)

    Defaults ``lr = 1e-3, beta1 = 0.9, beta2 = 0.999, eps = 1e-8`` are the
    paper's. The first step moves each parameter by about ``lr * sign(g)``.
    """

    def __init__(self, params: Sequence[tuple[str, np.ndarray]], beta1: float = 0.9,
                 beta2: float = 0.999, eps: float = 1e-8, weight_decay: float = 0.0,
                 decay: str = "decoupled") -> None:
        super().__init__(params, weight_decay, decay)
        for label, beta in (("beta1", beta1), ("beta2", beta2)):
            if not 0.0 <= beta < 1.0:
                raise InputError(f"Adam {label} must be in [0, 1), got {beta!r}")
        if not eps > 0.0:
            raise InputError(f"Adam eps must be > 0, got {eps!r}; 1e-8 is usual")
        self.beta1, self.beta2, self.eps = float(beta1), float(beta2), float(eps)
        self.m = [np.zeros_like(p) for p in self.arrays]
        self.v = [np.zeros_like(p) for p in self.arrays]

    def update(self, grads: Sequence[np.ndarray], lr: float) -> None:
        """One step with learning rate ``lr``; parameters change in place."""
        self.steps += 1
        t, b1, b2 = self.steps, self.beta1, self.beta2
        # Fold both bias corrections into the step size and the epsilon, so that
        # no corrected copy of m or v is made: lr * m_hat / (sqrt(v_hat) + eps)
        # = step * m / (sqrt(v) + eps_t) with the two values below.
        c2 = math.sqrt(1.0 - b2 ** t)
        step = lr * c2 / (1.0 - b1 ** t)
        eps_t = self.eps * c2
        grads = self._gradients(grads)
        self._decouple(lr)
        for p, g, m, v in zip(self.arrays, grads, self.m, self.v):
            t = p.dtype.type  # scalars in the parameter's dtype: float32 stays float32
            _adam_kernel(_flat(p), _flat(g, p.dtype), _flat(m), _flat(v), t(b1), t(1.0 - b1),
                         t(b2), t(1.0 - b2), t(step), t(eps_t))


def _flat(a: np.ndarray, dtype=None) -> np.ndarray:
    """A flat view of a contiguous array (a contiguous copy in ``dtype`` otherwise)."""
    return np.ascontiguousarray(a, dtype=dtype).reshape(-1)


# One pass over each tensor instead of four to six NumPy passes with
# temporaries. The operations and their order are those of the formulas in the
# class notes, in the parameter's dtype, so the results are the same bits as
# the NumPy expressions ``v *= mu; v += g; p -= lr * v`` and
# ``m *= b1; m += (1 - b1) g; v *= b2; v += (1 - b2) g^2;
# p -= step * m / (sqrt(v) + eps)``.


@njit(cache=True)
def _sgd_momentum_kernel(p, g, v, mu, lr):
    for i in range(p.shape[0]):
        vi = v[i] * mu
        vi = vi + g[i]
        v[i] = vi
        p[i] -= lr * vi


@njit(cache=True)
def _adam_kernel(p, g, m, v, b1, c1, b2, c2, step, eps):
    for i in range(p.shape[0]):
        gi = g[i]
        mi = m[i] * b1
        mi = mi + c1 * gi
        vi = v[i] * b2
        vi = vi + c2 * (gi * gi)
        m[i] = mi
        v[i] = vi
        p[i] -= step * mi / (np.sqrt(vi) + eps)


def learning_rate(base: float, epoch: int, epochs: int, schedule: str = "constant") -> float:
    """The learning rate of 0-based ``epoch`` out of ``epochs``.

    Parameters
    ----------
    base : float
        The starting learning rate.
    epoch : int
        0-based epoch index, ``0 <= epoch < epochs``.
    epochs : int
        Total epochs of the run.
    schedule : {"constant", "step", "cosine"}

    Notes
    -----
    * constant: ``base``;
    * step: ``base`` until half the epochs, ``base / 10`` until three
      quarters, then ``base / 100`` (drops at 50 % and 75 % of training,
      common practice for image classifiers);
    * cosine: ``base * (1 + cos(pi * epoch / epochs)) / 2`` (Loshchilov &
      Hutter, "SGDR", ICLR 2017, one cycle without restarts), which starts at
      ``base`` and ends just above 0.
    """
    if schedule not in SCHEDULES:
        raise InputError(f"learning-rate schedule {schedule!r} is unknown; "
                         f"expected one of {', '.join(SCHEDULES)}")
    if not 0 <= epoch < epochs:
        raise ValueError(f"epoch {epoch} outside 0..{epochs - 1}")
    if schedule == "constant":
        return float(base)
    if schedule == "step":
        drops = (epoch >= epochs * 0.5) + (epoch >= epochs * 0.75)
        return float(base) * 0.1 ** drops
    return float(base) * 0.5 * (1.0 + math.cos(math.pi * epoch / epochs))
