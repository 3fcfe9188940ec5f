"""Post-training int8 quantisation of folded steps (Jacob et al., CVPR 2018).

* Real values are ``r = S (q - Z)`` with real 0 exactly representable.
* Weights: symmetric per output channel, ``S_w = max|w| / 127``,
  ``q_w`` in [-127, 127] (zero point 0): ``round(w / S_w)``, or by default
  rounded with error feedback (:mod:`tinyconv.quant.rounding`).
* Activations: asymmetric per tensor from calibration (see
  :mod:`tinyconv.quant.calibrate`).
* Bias: int32 at scale ``S_in S_w``; accumulation in int32.
* Requantisation: ``M = S_in S_w / S_out`` per output channel as a fixed-point
  multiplier and shift (:mod:`tinyconv.quant.fixed_point`); a following ReLU is
  the clamp ``[max(Z_out, -128), 127]``.
* Pooling works on int8 directly and keeps its input's scale and zero point.
* The residual addition reads two tensors on their own grids and writes a
  third, calibrated like a weighted step's output
  (:mod:`tinyconv.quant.residual`: three fixed-point multipliers).
* The input: a ``256 x c`` table from a raw pixel value ``p`` of channel ``ch``
  to ``q(((p / 255) - mean_ch) / std_ch)``; its range is the exact range the
  table can take, so no input is ever clipped.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tinyconv.arch import Op
from tinyconv.errors import DataError, InputError
from tinyconv.quant.calibrate import QMAX, QMIN, calibrate, scale_zero_point
from tinyconv.quant.fixed_point import INT32_MAX, quantize_multiplier
from tinyconv.quant.fold import Step
from tinyconv.quant.residual import add_multipliers
from tinyconv.quant.rounding import METHODS, round_weights

MAX_PRODUCT = 255 * 127  # |q_in - Z_in| * |q_w| at most
TIE = 1e-9  # steps: how close to a half the input table treats as a tie


@dataclass(frozen=True, eq=False)
class QuantLayer:
    """One int8 step: what the integer reference and the C code both run.

    Attributes
    ----------
    kind : str
        ``conv``, ``dwconv``, ``dense``, ``maxpool``, ``avgpool``, ``gap``, ``add``.
    op : Op
        Shapes and geometry of the step.
    index : int
        Index of ``op`` in ``expand(...)``; ``covers`` lists every op merged.
    in_scale, in_zp, out_scale, out_zp : float, int
        Quantisation of the input and output tensors.
    weights : ndarray of int8 or None
        In the layer's float layout: conv ``(k, k, c_in, f)``, dwconv
        ``(k, k, c)``, dense ``(n_in, n_out)``.
    bias, multiplier, shift : ndarray of int32, shape (f,), or None
        (an ``add``: no bias; ``multiplier`` and ``shift`` of shape (3,), see
        :func:`~tinyconv.quant.residual.add_multipliers`)
    w_scale : ndarray of float64, shape (f,), or None
        Per-channel weight scales (for the record; not used by integers).
    lo, hi : int
        Output clamp (``lo = max(Z_out, -128)`` when a ReLU follows).
    relu : bool
    skip : int or None
        For an ``add``: the index of the layer whose output is the block's input
        (-1: the input quantisation); None otherwise.
    skip_scale, skip_zp : float, int
        For an ``add``: the quantisation of that input.
    """

    kind: str
    op: Op
    index: int
    covers: tuple[int, ...]
    in_scale: float
    in_zp: int
    out_scale: float
    out_zp: int
    weights: np.ndarray | None = None
    bias: np.ndarray | None = None
    multiplier: np.ndarray | None = None
    shift: np.ndarray | None = None
    w_scale: np.ndarray | None = None
    lo: int = QMIN
    hi: int = QMAX
    relu: bool = False
    skip: int | None = None
    skip_scale: float = 0.0
    skip_zp: int = 0

    @property
    def fan_in(self) -> int:
        """Products summed per output value."""
        if self.kind == "conv":
            return self.op.kernel ** 2 * self.op.in_shape[2]
        if self.kind == "dwconv":
            return self.op.kernel ** 2
        if self.kind == "dense":
            return int(np.prod(self.op.in_shape))
        return 0


@dataclass(frozen=True, eq=False)
class QuantizedNetwork:
    """An int8 network: input table, layers, and where it came from.

    Attributes
    ----------
    arch : str
        Architecture text.
    n_classes : int
    input_shape : tuple (h, w, c)
    table : ndarray of int8, shape (256, c)
        ``table[p, ch]`` is the quantised normalised value of pixel ``p``.
    in_scale, in_zp : float, int
        Quantisation of the input tensor.
    layers : tuple of QuantLayer
    n_calib : int
        Calibration images used; ``calibration`` names the range rule.
    rounding : str
        How weights were rounded (:mod:`tinyconv.quant.rounding`).
    """

    arch: str
    n_classes: int
    input_shape: tuple[int, int, int]
    table: np.ndarray
    in_scale: float
    in_zp: int
    layers: tuple[QuantLayer, ...]
    n_calib: int
    calibration: str = "minmax"
    rounding: str = "feedback"

    @property
    def logits_scale(self) -> float:
        """Real value of one int8 logit step."""
        return self.layers[-1].out_scale

    @property
    def logits_zp(self) -> int:
        return self.layers[-1].out_zp


def check_normalisation(mean, std, channels: int) -> tuple[np.ndarray, np.ndarray]:
    """Per-channel mean and std as float64 arrays of length ``channels``."""
    mean = np.asarray(mean, np.float64).reshape(-1)
    std = np.asarray(std, np.float64).reshape(-1)
    for name, arr in (("mean", mean), ("std", std)):
        if arr.shape != (channels,):
            raise InputError(f"normalisation {name} has {arr.size} values but the network "
                             f"reads {channels} channels; pass one value per channel")
        if not np.all(np.isfinite(arr)):
            raise InputError(f"normalisation {name} {arr.tolist()} is not finite; "
                             "recompute it from the training images")
    if np.any(std <= 0):
        raise InputError(f"normalisation std {std.tolist()} must be > 0 in every channel; "
                         "recompute it from the training images")
    return mean, std


def check_images(images, shape: tuple[int, int, int], what: str = "images") -> np.ndarray:
    """uint8 images of the network's input shape, as (n, h, w, c)."""
    images = np.asarray(images)
    if images.dtype != np.uint8:
        raise DataError(f"{what} have dtype {images.dtype}, but the int8 network reads raw "
                        "uint8 pixels; pass uint8 images (e.g. round(x * 255) of "
                        "prepared [0, 1] images)")
    if images.ndim != 4 or images.shape[1:] != tuple(shape) or images.shape[0] < 1:
        raise DataError(f"{what} have shape {images.shape}, expected (n >= 1, "
                        f"{', '.join(map(str, shape))}) in the network's input size and "
                        "colour mode; prepare them for the network's input first")
    return images


def normalised(images: np.ndarray, mean: np.ndarray, std: np.ndarray) -> np.ndarray:
    """``(p / 255 - mean) / std`` in float64, shape (n, h, w, c)."""
    return (images.astype(np.float64) / 255.0 - mean) / std


def input_table(mean: np.ndarray, std: np.ndarray) -> tuple[np.ndarray, float, int]:
    """The ``256 x c`` int8 input table and the input (scale, zero point).

    Notes
    -----
    Rounds half up, not half to even, and counts values within ``TIE`` of a
    half as the half (floating-point noise decides otherwise): when the scale
    lines up with the pixel grid every pixel sits on a tie, and ties broken
    any other way map pairs of neighbouring pixels to one value.
    """
    real = (np.arange(256, dtype=np.float64)[:, None] / 255.0 - mean) / std  # (256, c)
    scale, zp = scale_zero_point(real.min(), real.max())
    table = np.clip(np.floor(real / scale + 0.5 + TIE) + zp, QMIN, QMAX).astype(np.int8)
    return table, scale, zp


def _weight_axes(kind: str) -> tuple[int, ...]:
    """Axes reduced to get one value per output channel (channel last)."""
    return {"conv": (0, 1, 2), "dwconv": (0, 1), "dense": (0,)}[kind]


def quantize_weighted(step: Step, in_scale: float, in_zp: int, out_scale: float,
                      out_zp: int, moment: np.ndarray | None = None, samples: int = 0,
                      rounding: str = "nearest") -> QuantLayer:
    """Quantise one conv, dwconv or dense step.

    ``moment`` and ``samples`` (from :func:`~tinyconv.quant.calibrate.calibrate`)
    feed the error-feedback ``rounding`` (:mod:`tinyconv.quant.rounding`).

    Notes
    -----
    A channel's weight scale is raised above ``max|w| / 127`` only when its
    bias would not otherwise fit the int32 headroom left by the worst-case
    accumulation (``fan_in * 255 * 127``); for trained layers this touches
    only near-dead channels whose weights are ~0 anyway.
    """
    op = step.op
    layer = QuantLayer(step.kind, op, step.index, step.covers, in_scale, in_zp, out_scale,
                       out_zp)
    fan_in = layer.fan_in
    headroom = INT32_MAX - fan_in * MAX_PRODUCT
    if headroom <= 0:
        raise InputError(f"layer {op.name}: {fan_in} inputs per output can overflow an int32 "
                         f"accumulator (at most {INT32_MAX // MAX_PRODUCT} fit); pool or "
                         "stride earlier so the layer sees fewer inputs")
    w, b = step.w, step.b
    maxabs = np.abs(w).max(axis=_weight_axes(step.kind))  # (f,)
    w_scale = np.where(maxabs > 0, maxabs / 127.0, 1.0)
    w_scale = np.maximum(w_scale, np.abs(b) / (in_scale * headroom))
    q_w = round_weights(step.kind, w, w_scale, moment, samples, rounding)
    bias = np.round(b / (in_scale * w_scale)).astype(np.int64)
    mult = np.empty(len(b), np.int32)
    shift = np.empty(len(b), np.int32)
    for ch in range(len(b)):
        mult[ch], shift[ch] = quantize_multiplier(in_scale * w_scale[ch] / out_scale)
    lo = max(out_zp, QMIN) if step.relu else QMIN
    return QuantLayer(step.kind, op, step.index, step.covers, in_scale, in_zp, out_scale,
                      out_zp, weights=q_w, bias=bias.astype(np.int32), multiplier=mult,
                      shift=shift, w_scale=w_scale, lo=lo, hi=QMAX, relu=step.relu)


@dataclass(frozen=True)
class StepGrid:
    """What quantising one step may read: its input's grid, its calibrated output
    range and weight-rounding inputs, the layers quantised before it and the
    network input's grid."""

    scale: float
    zp: int
    lo: float
    hi: float
    moment: np.ndarray | None
    samples: int
    rounding: str
    before: tuple[QuantLayer, ...]
    input_scale: float
    input_zp: int


def weighted_step(step: Step, grid: StepGrid) -> QuantLayer:
    """conv, dwconv or dense: :func:`quantize_weighted` onto the calibrated output grid."""
    out_scale, out_zp = scale_zero_point(grid.lo, grid.hi)
    return quantize_weighted(step, grid.scale, grid.zp, out_scale, out_zp, grid.moment,
                             grid.samples, grid.rounding)


def add_step(step: Step, grid: StepGrid) -> QuantLayer:
    """The residual addition: both inputs' grids and the calibrated output grid."""
    scale, zp = grid.scale, grid.zp
    out_scale, out_zp = scale_zero_point(grid.lo, grid.hi)
    b = grid.before[step.skip] if step.skip >= 0 else None
    b_scale, b_zp = (b.out_scale, b.out_zp) if b is not None else (grid.input_scale,
                                                                    grid.input_zp)
    mult, shift = add_multipliers(scale, b_scale, out_scale)
    return QuantLayer("add", step.op, step.index, step.covers, scale, zp, out_scale,
                      out_zp, multiplier=mult, shift=shift, skip=step.skip,
                      skip_scale=b_scale, skip_zp=b_zp)


def same_grid_step(step: Step, grid: StepGrid) -> QuantLayer:
    """A step whose output keeps its input's scale and zero point (pooling)."""
    scale, zp = grid.scale, grid.zp
    return QuantLayer(step.kind, step.op, step.index, step.covers, scale, zp, scale, zp)


def quantize_steps(steps: tuple[Step, ...], arch: str, n_classes: int,
                   input_shape: tuple[int, int, int], mean, std,
                   calib_images: np.ndarray, batch: int = 64,
                   rounding: str = "feedback") -> QuantizedNetwork:
    """Calibrate on ``calib_images`` and quantise every step.

    Parameters
    ----------
    steps : tuple of Step
        From :func:`tinyconv.quant.fold.build_steps`.
    arch : str
        Architecture text (kept for the record).
    input_shape : (h, w, c)
    mean, std : array_like, shape (c,)
        The normalisation the float network was trained with.
    calib_images : ndarray of uint8, shape (n, h, w, c)
        Raw images in the network's input size and colour mode.
    rounding : {"feedback", "nearest"}
        How to round the weights (:mod:`tinyconv.quant.rounding`).
    """
    if rounding not in METHODS:
        raise InputError(f"weight rounding {rounding!r} is unknown; expected one of "
                         f"{', '.join(METHODS)}")
    mean, std = check_normalisation(mean, std, input_shape[2])
    calib_images = check_images(calib_images, input_shape, "calibration images")
    table, in_scale, in_zp = input_table(mean, std)
    cal = calibrate(steps, normalised(calib_images, mean, std), batch=batch,
                    moments=rounding == "feedback")
    from tinyconv.quant.kinds import step_kind  # the table imports this module: read at call time
    layers: list[QuantLayer] = []
    scale, zp = in_scale, in_zp
    for step, (lo, hi), moment, samples in zip(steps, cal.ranges, cal.moments, cal.samples):
        grid = StepGrid(scale, zp, lo, hi, moment, samples, rounding, tuple(layers),
                        in_scale, in_zp)
        layer = step_kind(step.kind).quantize(step, grid)
        scale, zp = layer.out_scale, layer.out_zp
        layers.append(layer)
    return QuantizedNetwork(arch, n_classes, tuple(input_shape), table, in_scale, in_zp,
                            tuple(layers), n_calib=int(calib_images.shape[0]),
                            rounding=rounding)
