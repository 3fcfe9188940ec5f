"""Integer-only inference of a :class:`QuantizedNetwork` in NumPy.

The reference the generated C must match bit for bit. Every value here is an
integer: int8 tensors, int64 accumulators that hold exactly the int32 sums
the C forms (the quantiser guarantees they fit in int32), the fixed-point
requantisation of :mod:`tinyconv.quant.fixed_point`, and integer rounding
division for the averages. No float touches a tensor.
"""

from __future__ import annotations

import numpy as np

from tinyconv.quant.fixed_point import multiply_by_quantized_multiplier
from tinyconv.quant.patches import conv_patches, pool_windows
from tinyconv.quant.quantize import QuantizedNetwork, QuantLayer, check_images
from tinyconv.quant.residual import add_integer


def quantize_input(qnet: QuantizedNetwork, images: np.ndarray) -> np.ndarray:
    """Look raw pixels up in the input table.

    Parameters
    ----------
    images : ndarray of uint8, shape (n, h, w, c)

    Returns
    -------
    ndarray of int8, shape (n, h, w, c): ``table[p, ch]`` per pixel.
    """
    c = qnet.input_shape[2]
    return qnet.table[images, np.arange(c)]


def rounding_divide(total: np.ndarray, count: int) -> np.ndarray:
    """``total / count`` rounded half away from zero (``count >= 1``).

    Written as C99 does it: ``(|t| + count / 2) / count`` with truncating
    integer division, then the sign put back.
    """
    total = np.asarray(total, np.int64)
    return np.sign(total) * ((np.abs(total) + count // 2) // count)


def requantize(acc: np.ndarray, layer: QuantLayer) -> np.ndarray:
    """int64 accumulators (..., f) -> int8 outputs on the layer's output grid."""
    y = multiply_by_quantized_multiplier(acc, layer.multiplier, layer.shift) + layer.out_zp
    return np.clip(y, layer.lo, layer.hi).astype(np.int8)


# float64 represents every integer of magnitude below 2**53 exactly, so a
# product of integer matrices computed by float64 BLAS is exact (in any
# summation order) while every partial sum stays below that (IEEE 754 binary64:
# 53-bit significand).
_EXACT = 2.0 ** 53


def integer_matmul(a: np.ndarray, b: np.ndarray, a_max: int | None = None) -> np.ndarray:
    """``a @ b`` for integer arrays, exactly, as int64.

    Runs as a float64 BLAS product when ``K * max|a| * max|b|`` bounds every
    partial sum below 2**53 (int8 layers are far below it: 255 * 127 per term),
    else as NumPy's int64 product, which is exact but has no BLAS and is tens
    of times slower. ``a_max``, when the caller knows a bound of ``|a|`` (the
    largest input of a convolution bounds its patches), saves a pass over ``a``.
    """
    k = a.shape[-1]
    a_max = np.abs(a).max(initial=0) if a_max is None else a_max
    bound = float(k) * float(a_max) * float(np.abs(b).max(initial=0))
    if bound < _EXACT:
        return (a.astype(np.float64) @ b.astype(np.float64)).astype(np.int64)
    return a.astype(np.int64) @ b.astype(np.int64)


def accumulate(layer: QuantLayer, x: np.ndarray) -> np.ndarray:
    """The int32 accumulators of a conv, dwconv or dense layer (bias included).

    Parameters
    ----------
    x : ndarray of int8, shape (n, *layer.op.in_shape)

    Returns
    -------
    ndarray of int64, shape (n, *layer.op.out_shape): ``bias + sum (q_in - Z_in) q_w``
    """
    n = x.shape[0]
    xs = x.astype(np.int64) - layer.in_zp  # real 0 is now integer 0 (padding too)
    w = layer.weights.astype(np.int64)
    if layer.kind == "conv":
        cols = conv_patches(xs, layer.op)  # (n, oh, ow, k, k, c)
        kkc = cols.shape[3] * cols.shape[4] * cols.shape[5]
        # (n, oh, ow, k*k*c) @ (k*k*c, f)
        acc = integer_matmul(cols.reshape(*cols.shape[:3], kkc), w.reshape(kkc, -1),
                             a_max=np.abs(xs).max(initial=0))  # patches hold xs and zeros
    elif layer.kind == "dwconv":
        acc = np.einsum("nyxijc,ijc->nyxc", conv_patches(xs, layer.op), w)
    elif layer.kind == "dense":
        acc = integer_matmul(xs.reshape(n, -1), w)  # a map is read in NHWC order, as flatten does
    else:
        raise ValueError(f"layer kind {layer.kind!r} has no accumulators")
    return acc + layer.bias


def run_layer(layer: QuantLayer, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    """Apply one int8 layer.

    Parameters
    ----------
    x : ndarray of int8, shape (n, *layer.op.in_shape)
    skip : ndarray of int8, optional
        For an ``add``: the block's input (on its own grid).

    Returns
    -------
    ndarray of int8, shape (n, *layer.op.out_shape)
    """
    from tinyconv.quant.kinds import step_kind  # the table imports this module: read at call time
    return step_kind(layer.kind).run_int(layer, x, skip)


# ----------------------------------------------- the integer step of each built-in kind


def weighted(layer: QuantLayer, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    """conv, dwconv or dense: accumulate, then requantise."""
    return requantize(accumulate(layer, x), layer)


def maxpool(layer: QuantLayer, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    return pool_windows(x, layer.op.size).max(axis=3)


def avgpool(layer: QuantLayer, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    s = layer.op.size
    total = pool_windows(x, s).astype(np.int64).sum(axis=3)
    return rounding_divide(total, s * s).astype(np.int8)


def gap(layer: QuantLayer, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    h, w = x.shape[1], x.shape[2]
    return rounding_divide(x.astype(np.int64).sum(axis=(1, 2)), h * w).astype(np.int8)


def add(layer: QuantLayer, x: np.ndarray, skip: np.ndarray | None = None) -> np.ndarray:
    return add_integer(x, layer.in_zp, skip.reshape(x.shape), layer.skip_zp,
                       layer.multiplier, layer.shift, layer.out_zp)


#: extra fractional bits of the outputs the arg-max is taken on
WIDE_BITS = 8


def head_classes(layer: QuantLayer, acc: np.ndarray) -> np.ndarray:
    """Arg-max of the classifier head's outputs with :data:`WIDE_BITS` more bits.

    The int8 logits round the head's outputs to one output step, so two close
    classes often get equal logits; the class is therefore taken on the same
    requantisation with the shift reduced by ``WIDE_BITS`` (a grid 256 times
    finer, in int32), which the C does too. Among equal values the first wins.

    Parameters
    ----------
    layer : QuantLayer
        The last (dense) layer.
    acc : ndarray of int64, shape (n, K)
        Its accumulators.
    """
    wide = (multiply_by_quantized_multiplier(acc, layer.multiplier, layer.shift - WIDE_BITS)
            + layer.out_zp * (1 << WIDE_BITS))
    return wide.argmax(axis=1)


def int8_outputs(qnet: QuantizedNetwork, images: np.ndarray,
                 batch: int = 128) -> tuple[np.ndarray, np.ndarray]:
    """int8 logits and classes of raw images.

    Parameters
    ----------
    images : ndarray of uint8, shape (n, h, w, c)
        In the network's input size and colour mode.
    batch : int
        Images per pass (bounds memory).

    Returns
    -------
    logits : ndarray of int8, shape (n, K)
    classes : ndarray of int64, shape (n,)
        See :func:`head_classes`.
    """
    images = check_images(images, qnet.input_shape)
    logits, classes = [], []
    head = qnet.layers[-1]
    wanted = {layer.skip for layer in qnet.layers if layer.skip is not None}
    for start in range(0, images.shape[0], batch):
        x = quantize_input(qnet, images[start:start + batch])
        held = {-1: x} if -1 in wanted else {}  # blocks' inputs, until their additions
        for j, layer in enumerate(qnet.layers[:-1]):
            x = run_layer(layer, x, None if layer.skip is None else held.pop(layer.skip))
            if j in wanted:
                held[j] = x
        acc = accumulate(head, x)
        logits.append(requantize(acc, head))
        classes.append(head_classes(head, acc))
    return np.concatenate(logits), np.concatenate(classes)


def int8_logits(qnet: QuantizedNetwork, images: np.ndarray) -> np.ndarray:
    """int8 logits, shape (n, K), of raw uint8 images (n, h, w, c)."""
    return int8_outputs(qnet, images)[0]


def int8_predict(qnet: QuantizedNetwork, images: np.ndarray) -> np.ndarray:
    """The class of each image, as the C returns it (see :func:`head_classes`)."""
    return int8_outputs(qnet, images)[1]
