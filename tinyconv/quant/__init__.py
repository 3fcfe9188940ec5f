"""Post-training int8 quantisation and the integer-only reference inference.

The path from a trained float :class:`~tinyconv.network.Network` to integers:

1. :mod:`~tinyconv.quant.fold` merges the ops into deployable steps (batch
   norm folded, ReLU fused, dropout and flatten gone);
2. :mod:`~tinyconv.quant.calibrate` measures activation ranges on calibration
   images;
3. :mod:`~tinyconv.quant.quantize` makes int8 weights, int32 biases and
   fixed-point multipliers (:mod:`~tinyconv.quant.fixed_point`);
4. :mod:`~tinyconv.quant.integer` runs the result with integers only: the
   reference for the generated C.
"""

from __future__ import annotations

import numpy as np

from tinyconv.errors import DataError
from tinyconv.quant.evaluate import Agreement, compare, float_logits
from tinyconv.quant.fold import network_steps
from tinyconv.quant.integer import int8_logits, int8_predict
from tinyconv.quant.quantize import QuantizedNetwork, QuantLayer, quantize_steps

__all__ = ["quantize_network", "int8_accuracy", "as_pixels", "int8_logits", "int8_predict", "compare",
           "float_logits", "Agreement", "QuantizedNetwork", "QuantLayer"]


def as_pixels(x: np.ndarray) -> np.ndarray:
    """Prepared images in [0, 1] as the 8-bit pixels a device camera gives.

    Parameters
    ----------
    x : ndarray, shape (n, h, w, c)
        Float images in [0, 1] (e.g. from :func:`tinyconv.data.prepare`).

    Returns
    -------
    ndarray of uint8, same shape: ``rint(255 x)`` (exact for images that were uint8).
    """
    return np.rint(np.clip(np.asarray(x, np.float64), 0.0, 1.0) * 255.0).astype(np.uint8)


def quantize_network(net, mean, std, calib_images: np.ndarray,
                     rounding: str = "feedback") -> QuantizedNetwork:
    """Post-training int8 quantisation of a trained network.

    Parameters
    ----------
    net : tinyconv.network.Network
    mean, std : array_like, shape (c,)
        The normalisation it was trained with (``(p / 255 - mean) / std``).
    calib_images : ndarray of uint8, shape (n, h, w, c)
        Raw calibration images in the network's input size and colour mode.
    rounding : {"feedback", "nearest"}
        Weight rounding (:mod:`tinyconv.quant.rounding`).

    Raises
    ------
    ArchError
        When a batch norm cannot be folded (it does not follow conv/dwconv/dense).
    DataError, InputError
        For images or normalisation that do not fit the network.
    """
    return quantize_steps(network_steps(net), str(net.arch), net.n_classes,
                          tuple(net.arch.input.shape), mean, std, calib_images,
                          rounding=rounding)


def int8_accuracy(net, mean, std, calib_images: np.ndarray, images: np.ndarray,
                  labels: np.ndarray, rounding: str = "feedback") -> float:
    """Held-out accuracy of the int8 form of ``net``.

    Parameters
    ----------
    net : Network
        Trained float network.
    mean, std : array_like, shape (c,)
        Its normalisation.
    calib_images : ndarray of uint8, shape (m, h, w, c)
        Calibration images (from the training part, never the held-out part).
    images : ndarray of uint8, shape (n, h, w, c)
    labels : ndarray of int, shape (n,)
    rounding : {"feedback", "nearest"}
        Weight rounding (:mod:`tinyconv.quant.rounding`).

    Returns
    -------
    float
        Fraction of ``images`` whose int8 arg-max equals the label.
    """
    qnet = quantize_network(net, mean, std, calib_images, rounding=rounding)
    labels = np.asarray(labels).reshape(-1)
    pred = int8_predict(qnet, images)
    if labels.shape[0] != pred.shape[0]:
        raise DataError(f"{labels.shape[0]} labels for {pred.shape[0]} images; "
                        "give one label per image")
    return float(np.mean(pred == labels))
