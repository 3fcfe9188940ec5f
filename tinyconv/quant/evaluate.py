"""Float against int8 on the same raw images: agreement and accuracy."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tinyconv.errors import DataError
from tinyconv.quant.integer import int8_predict
from tinyconv.quant.quantize import QuantizedNetwork, check_images, check_normalisation, normalised


@dataclass(frozen=True)
class Agreement:
    """How the int8 network compares with the float one on ``n`` images.

    ``agreement`` is the fraction of images where both pick the same class;
    the accuracies are None when no labels were given.
    """

    n: int
    agreement: float
    float_accuracy: float | None = None
    int8_accuracy: float | None = None


def float_logits(net, images: np.ndarray, mean, std, batch: int = 256) -> np.ndarray:
    """The float network's logits of raw uint8 images, normalised as in training.

    Parameters
    ----------
    images : ndarray of uint8, shape (n, h, w, c)

    Returns
    -------
    ndarray, shape (n, K)
    """
    shape = tuple(net.arch.input.shape)
    images = check_images(images, shape)
    mean, std = check_normalisation(mean, std, shape[2])
    out = [net.forward(normalised(images[i:i + batch], mean, std).astype(net.dtype))
           for i in range(0, images.shape[0], batch)]
    return np.concatenate(out)


def compare(net, qnet: QuantizedNetwork, mean, std, images: np.ndarray,
            labels: np.ndarray | None = None) -> Agreement:
    """Top-1 agreement (and accuracies when ``labels`` are given) of float and int8."""
    f_pred = float_logits(net, images, mean, std).argmax(axis=1)
    q_pred = int8_predict(qnet, images)
    n = int(images.shape[0])
    if labels is None:
        return Agreement(n, float(np.mean(f_pred == q_pred)))
    labels = np.asarray(labels).reshape(-1)
    if labels.shape[0] != n:
        raise DataError(f"{labels.shape[0]} labels for {n} images; give one label per image")
    return Agreement(n, float(np.mean(f_pred == q_pred)), float(np.mean(f_pred == labels)),
                     float(np.mean(q_pred == labels)))
