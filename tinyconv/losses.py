"""Softmax cross-entropy, the one training loss, with optional label smoothing.

The loss of one image with logits ``z`` (K values) and target distribution
``q`` is ``-sum_k q_k log softmax(z)_k``; the batch loss is the mean over the
images. ``log softmax`` is computed as ``z - max(z) - log(sum(exp(z - max(z))))``
(the log-sum-exp shift), so logits of any size stay finite: the largest
shifted logit is 0 and every exponential lies in (0, 1].

With label smoothing ``eps`` the target is ``q' = (1 - eps) onehot + eps / K``
and the gradient with respect to the logits is ``softmax(z) - q'`` per image
(Szegedy et al., "Rethinking the Inception Architecture", CVPR 2016), divided
by ``n`` for the batch mean.
"""

from __future__ import annotations

import numpy as np

from tinyconv.errors import InputError


def log_softmax(logits: np.ndarray) -> np.ndarray:
    """Row-wise log of the softmax, stable for logits of any size.

    Parameters
    ----------
    logits : ndarray, shape (n, K)

    Returns
    -------
    ndarray, shape (n, K), same dtype
        ``logits - logsumexp(logits, axis=1)``.
    """
    shifted = logits - logits.max(axis=1, keepdims=True)  # (n, K), max 0 per row
    return shifted - np.log(np.exp(shifted).sum(axis=1, keepdims=True))


def softmax(logits: np.ndarray) -> np.ndarray:
    """Row-wise softmax (class probabilities), stable for logits of any size.

    Parameters
    ----------
    logits : ndarray, shape (n, K)

    Returns
    -------
    ndarray, shape (n, K), same dtype; each row sums to 1.
    """
    e = np.exp(logits - logits.max(axis=1, keepdims=True))  # (n, K) in (0, 1]
    return e / e.sum(axis=1, keepdims=True)


def check_smoothing(smoothing: float) -> float:
    """Return ``smoothing`` as a float after checking ``0 <= smoothing < 1``."""
    value = float(smoothing)
    if not 0.0 <= value < 1.0:
        raise InputError(f"label smoothing must be in [0, 1), got {smoothing!r}; "
                         "use 0 for none or a small value such as 0.1")
    return value


def softmax_cross_entropy(logits: np.ndarray, labels: np.ndarray,
                          smoothing: float = 0.0) -> tuple[float, np.ndarray]:
    """Mean softmax cross-entropy over a batch and its gradient.

    Parameters
    ----------
    logits : ndarray, shape (n, K), float
    labels : ndarray, shape (n,), int in ``0..K-1``
    smoothing : float
        Label smoothing ``eps`` in [0, 1).

    Returns
    -------
    loss : float
        ``mean_i -sum_k q'_ik log softmax(logits)_ik``; NaN or inf when the
        logits are not finite (the caller treats that as divergence).
    grad : ndarray, shape (n, K), dtype of ``logits``
        ``(softmax(logits) - q') / n``.

    Raises
    ------
    InputError
        When shapes disagree, a label is outside ``0..K-1`` or the smoothing
        is outside [0, 1).
    """
    eps = check_smoothing(smoothing)
    if logits.ndim != 2:
        raise InputError(f"logits must have shape (n, K), got {logits.shape}")
    n, k = logits.shape
    labels = np.asarray(labels)
    if labels.shape != (n,):
        raise InputError(f"labels must have shape ({n},) to match logits {logits.shape}, "
                         f"got {labels.shape}")
    if n == 0:
        raise InputError("an empty batch has no loss; give at least one image")
    if labels.dtype.kind not in "iu":
        raise InputError(f"labels must be integers, got dtype {labels.dtype}")
    if labels.min() < 0 or labels.max() >= k:
        bad = labels[(labels < 0) | (labels >= k)][0]
        raise InputError(f"label {bad} is outside 0..{k - 1} for {k} classes; "
                         "labels must be class indices")

    logp = log_softmax(logits)                               # (n, K)
    rows = np.arange(n)
    # -sum_k q'_k log p_k = -(1 - eps) log p_y - (eps / K) sum_k log p_k
    per_image = -(1.0 - eps) * logp[rows, labels]
    if eps:
        per_image = per_image - (eps / k) * logp.sum(axis=1)
    loss = float(per_image.mean())

    grad = np.exp(logp)                                      # softmax, (n, K)
    grad[rows, labels] -= 1.0 - eps
    if eps:
        grad -= eps / k
    grad /= n
    return loss, grad.astype(logits.dtype, copy=False)
