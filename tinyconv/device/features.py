"""The device stage's table: the time model's variables of each step kind, :data:`STEP_MODELS`.

Each :class:`StepModel` gives the loop counts of one step kind's fast kernels
(:mod:`tinyconv.export.c_fast`), the variables :mod:`tinyconv.device.model`
multiplies by the fitted per-core coefficients, and the kernels (templates)
the kind needs, whose code size is fitted per kernel. A new step kind adds one
entry here and is refitted (``python -m tinyconv.device.refit``; DEVELOPERS.md,
"Where a change goes").
"""

from __future__ import annotations

from dataclasses import dataclass
from math import prod
from typing import Callable

from tinyconv.export.c_fast_conv import PATCH_TABLE
from tinyconv.ops import Op


@dataclass(frozen=True)
class StepModel:
    """The time model of one step kind.

    Attributes
    ----------
    features : callable(op, in_shape) -> dict of str to float
        The counts of the step's loop nest (``op`` is None for the input step).
    kernels : tuple of str
        The C kernels (templates) the kind needs.
    """

    features: Callable[[Op | None, tuple[int, ...]], dict[str, float]]
    kernels: tuple[str, ...]


def _visited(size: int, out: int, kernel: int, stride: int, pad: int) -> int:
    """Sum over output positions of the kernel offsets that land inside ``size``."""
    total = 0
    for o in range(out):
        start = o * stride - pad
        total += min(start + kernel, size) - max(start, 0)
    return total


def _edge_positions(size: int, out: int, kernel: int, stride: int, pad: int) -> int:
    """Output positions whose kernel window reaches outside ``size`` (into the padding)."""
    return sum(1 for o in range(out) if o * stride - pad < 0 or o * stride - pad + kernel > size)


def input_features(op: Op | None, in_shape: tuple[int, ...]) -> dict[str, float]:
    # a loop over pixels, each pixel's channels through the table
    n, c = float(prod(in_shape)), in_shape[-1]
    return {"one": 1.0, "values": n, "pixels": n / c}


def dense_features(op: Op, in_shape: tuple[int, ...]) -> dict[str, float]:
    """dense and head: pairs of outputs, steps of four inputs, single ones."""
    n_in, n_out = prod(op.in_shape), prod(op.out_shape)
    pairs = -(-n_out // 2)
    return {"one": 1.0, "outputs": float(n_out), "pairs": float(pairs),
            "steps4": float(pairs * (n_in // 4)), "singles": float(pairs * (n_in % 4))}


def gap_features(op: Op, in_shape: tuple[int, ...]) -> dict[str, float]:
    h, w, c = op.in_shape
    return {"one": 1.0, "outputs": float(c), "reads": float(h * w * c)}


def add_features(op: Op, in_shape: tuple[int, ...]) -> dict[str, float]:
    # one pass over the values, three fixed-point rescalings each
    return {"one": 1.0, "values": float(prod(op.out_shape))}


def _inside(size: int, out: int, kernel: int, stride: int, pad: int) -> int:
    """Output positions whose kernel window lies wholly inside ``size``."""
    return out - _edge_positions(size, out, kernel, stride, pad)


def pool_features(op: Op, in_shape: tuple[int, ...]) -> dict[str, float]:
    """maxpool and avgpool (a 2 x 2 max pooling has a kernel of its own, four channels a
    word on the DSP path)."""
    oh, ow, c = op.out_shape
    size = op.size
    feats = {"one": 1.0, "pixels": float(oh * ow), "outputs": float(oh * ow * c)}
    if op.kind == "maxpool" and size == 2:
        feats["words_by_2"] = float(oh * ow * (c // 4))
        feats["rest_by_2"] = float(oh * ow * (c % 4))
    else:
        feats["reads"] = float(oh * ow * c * size * size)
        feats["rows"] = float(oh * ow * c * size)
    return feats


@dataclass(frozen=True)
class _Window:
    """A sliding window's counts over one layer: sizes, kernel rows and columns inside
    the image summed over output rows and columns (``vy``, ``vx``), output positions
    whose window lies inside (``inside_y``, ``inside_x``)."""

    h: int
    w: int
    c: int
    oh: int
    ow: int
    k: int
    vy: int
    vx: int
    inside_y: int
    inside_x: int


def _window(op: Op) -> _Window:
    h, w, c = op.in_shape
    oh, ow = op.out_shape[:2]
    k, s = op.kernel, op.stride
    top, _, left, _ = op.pads
    return _Window(h, w, c, oh, ow, k, _visited(h, oh, k, s, top), _visited(w, ow, k, s, left),
                   _inside(h, oh, k, s, top), _inside(w, ow, k, s, left))


def conv_features(op: Op, in_shape: tuple[int, ...]) -> dict[str, float]:
    """conv (:mod:`tinyconv.export.c_fast_conv`): pairs of pixels, their patches, and per
    pair of pixels and pair of filters two groups of four a turn, one left-over
    group (``K`` rounded up to whole groups), and the requantisation."""
    win, f = _window(op), op.out_shape[2]
    c, k, vy, vx, n = win.c, win.k, win.vy, win.vx, win.oh * win.ow
    kk = k * k * c
    pixel_pairs, filter_pairs = -(-n // 2), f // 2
    odd = f % 2
    slots = 2 * pixel_pairs  # a last odd pixel's patch is built twice
    groups = -(-kk // 4)  # the exporter pads K with zeros to whole groups
    # the patch: by table for a short K whose kernel rows do not fill whole groups
    # (inside pixels; the others by the same table, testing each tap), a window
    # whose rows fill groups in one call (inside pixels), else row by row, four
    # values a step where rows fill groups
    visited = vy * vx * c
    table = kk <= PATCH_TABLE and (k * c) % 4 != 0
    aligned = (k * c) % 4 == 0
    inside = win.inside_y * win.inside_x
    by_table = inside * kk if table else 0
    edge_table = (n - inside) * kk if table else 0
    windows = inside if aligned else 0
    row_pixels = 0 if table else (n - inside if aligned else n)
    by_rows = 0 if table else visited - by_table
    padded = 0 if table else n * kk - visited
    return {"one": 1.0, "pixel_pairs": float(pixel_pairs),
            "patch_table": float(by_table),
            "patch_edge_values": float(edge_table),
            "patch_edge_pixels": float(n - inside if table else 0),
            "patch_windows": float(windows),
            "patch_rows": float(row_pixels * k),
            "patch_groups": float(by_rows // 4 if aligned else 0),
            "patch_values": float(0 if aligned else by_rows),
            # taps in the padding: zero groups where rows fill groups, else one by one
            "pad_groups": float(padded // 4 if aligned else 0),
            "pad_values": float(0 if aligned else padded),
            "blocks": float(pixel_pairs * filter_pairs),
            "group_pairs": float(pixel_pairs * filter_pairs * (groups // 2)),
            "group_last": float(pixel_pairs * filter_pairs * (groups % 2)),
            "odd_steps4": float(pixel_pairs * odd * groups),
            "outputs": float(slots * f)}


def dwconv_features(op: Op, in_shape: tuple[int, ...]) -> dict[str, float]:
    """dwconv: blocks of four channels per pixel, the channel loop innermost, kernel rows
    and taps inside the image (a whole row of a 3-wide window written out), and the
    padding's taps of edge pixels."""
    win = _window(op)
    c, k, vy, vx, n = win.c, win.k, win.vy, win.vx, win.oh * win.ow
    blocks = -(-c // 4)
    full = c // 4
    edge_y, edge_x = win.oh - win.inside_y, win.ow - win.inside_x
    edge = edge_y * win.ow + edge_x * win.oh - edge_y * edge_x
    # rows of four-channel blocks whose window is 3 wide and inside across: written out
    rows3 = vy * win.inside_x if k == 3 else 0
    return {"one": 1.0, "pixels": float(n), "blocks": float(n * blocks),
            "rows": float(vy * win.ow * blocks), "rows3": float(rows3 * full),
            "taps4": float((vy * vx - 3 * rows3) * full),
            "taps_rest": float(vy * vx * (c - 4 * full)),
            "edge_taps": float(edge * k * k * blocks), "outputs": float(n * c)}


#: the device stage's entry of every step kind, the input step and the head (this
#: order is the order of the fitted constants)
STEP_MODELS: dict[str, StepModel] = {
    "input": StepModel(input_features, ()),
    "conv": StepModel(conv_features, ("scale", "conv")),
    "dwconv": StepModel(dwconv_features, ("scale", "dwconv")),
    "dense": StepModel(dense_features, ("scale", "dot", "dense")),
    "head": StepModel(dense_features, ("scale", "dot", "head")),
    "maxpool": StepModel(pool_features, ("maxpool",)),
    "avgpool": StepModel(pool_features, ("rdiv", "avgpool")),
    "gap": StepModel(gap_features, ("rdiv", "gap")),
    "add": StepModel(add_features, ("scale", "add")),
}


def step_model(kind: str) -> StepModel:
    """The :class:`StepModel` of a step kind (or ``input``, ``head``)."""
    model = STEP_MODELS.get(kind)
    if model is None:
        raise ValueError(f"step kind {kind!r} has no device time model; known kinds: "
                         f"{', '.join(STEP_MODELS)}; add its StepModel to "
                         "tinyconv.device.features.STEP_MODELS and refit the constants "
                         "(python -m tinyconv.device.refit)")
    return model
