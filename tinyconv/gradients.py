"""The finite-difference gradient checker, shared by the tests and ``tinyconv gradients``.

Method
------
* Central differences ``(f(t + h) - f(t - h)) / 2h`` in float64, whose error
  is O(h**2); ``h = 1e-5`` sits in the range 6e-6 to 1e-5 recommended for
  float64 (Nocedal & Wright, Numerical Optimization, section 8.1 [from memory]).
* A layer is checked through the scalar ``f = sum(y * G)`` with a *random*
  upstream gradient ``G`` (standard normal, seeded): an upstream of ones would
  let errors that cancel across outputs go unseen. A network is checked
  through its loss. The difference ``f(t + h) - f(t - h)`` is formed from the
  two outputs element by element before summing, so unchanged outputs cancel
  exactly and round-off stays near ``eps * |y| / h``.
* Relative error per coordinate ``|a - n| / max(|a|, |n|, floor)``, reported
  as the maximum per parameter tensor and for the input. ``floor`` is
  ``FLOOR_FRACTION`` (1e-3) times the largest gradient magnitude of the whole
  check (every tensor of the layer or network, analytic and numeric; at least
  ``TINY``). A component a thousand times smaller than that is judged on that
  scale, because round-off in the difference quotient (about
  ``eps * |f| / h``) would otherwise dominate it: a gradient that is zero in
  exact arithmetic, such as a convolution bias just before batch norm, is
  computed as round-off on both sides. Such a tensor's note says
  "gradient is round-off small". The absolute tolerance this leaves is
  ``THRESHOLD * FLOOR_FRACTION = 1e-9`` times the largest gradient.
* Pass threshold ``THRESHOLD = 1e-6``: smooth float64 checks reach about 1e-7
  or better, and anything above 1e-4 is suspicious (common practice).
* Kinks. ReLU and max pooling are not differentiable where an input crosses
  zero or where a window's maximum changes hands. Layers that have kinks expose
  ``kink_state()`` (the ReLU sign mask, the max-pool winners); a coordinate
  whose ``t + h`` or ``t - h`` forward changes any layer's kink state
  straddles a kink and is skipped, and the row's note says how many were.
  A tensor whose every coordinate straddles a kink fails (nothing was checked).
* Dropout is made deterministic: the checker sets ``hold_mask`` so every
  forward reuses one mask, drawn by the first forward; the note says so.
* The layer or network is deep-copied and cast to float64; the caller's
  object is never changed.
"""

from __future__ import annotations

import copy
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

STEP = 1e-5
THRESHOLD = 1e-6
FLOOR_FRACTION = 1e-3
TINY = 1e-12
MAX_COORDS = 512


@dataclass(frozen=True)
class GradRow:
    """One checked tensor.

    Attributes
    ----------
    layer : str
        Layer name (``op.name``; ``"{index}:{op.name}"`` in a network; ``"input"``).
    tensor : str
        Parameter key (``"w"``, ``"b"``, ``"gamma"``, ``"beta"``) or ``"x"`` for the input.
    shape : tuple of int
    max_rel_error : float
        Largest relative error over the checked coordinates (``nan`` if none).
    passed : bool
        ``max_rel_error < threshold`` and at least one coordinate checked.
    note : str
        Sampling, skipped kinks, the fixed dropout mask; empty when nothing to say.
    """

    layer: str
    tensor: str
    shape: tuple[int, ...]
    max_rel_error: float
    passed: bool
    note: str = ""


def relative_error(analytic: np.ndarray, numeric: np.ndarray,
                   floor: float | None = None) -> np.ndarray:
    """``|a - n| / max(|a|, |n|, floor)`` element by element.

    ``floor`` defaults to ``FLOOR_FRACTION`` times the largest magnitude in
    either array, and is never below ``TINY``.
    """
    a = np.asarray(analytic, dtype=np.float64)
    n = np.asarray(numeric, dtype=np.float64)
    if floor is None:
        scale = max(float(np.max(np.abs(a), initial=0.0)), float(np.max(np.abs(n), initial=0.0)))
        floor = FLOOR_FRACTION * scale
    floor = max(floor, TINY)
    return np.abs(a - n) / np.maximum(np.maximum(np.abs(a), np.abs(n)), floor)


def _generator(seed: int) -> np.random.Generator:
    """The checker's own stream for ``seed``.

    Keyed by ``(seed, 1)`` rather than ``seed`` alone, so the upstream gradient
    is not the very same draw as test data made with ``default_rng(seed)``
    (an upstream proportional to the input makes, e.g., batch norm's input
    gradient cancel to almost nothing and the check meaningless).
    """
    return np.random.default_rng((int(seed), 1))


def _scale(arrays: Sequence) -> float:
    """Largest finite magnitude over the analytic gradients of one check."""
    best = 0.0
    for a in arrays:
        if a is not None and np.size(a):
            a = np.abs(np.asarray(a, dtype=np.float64))
            a = a[np.isfinite(a)]
            if a.size:
                best = max(best, float(a.max()))
    return best


def _kink_states(layers: Sequence) -> list:
    return [s for s in (getattr(layer, "kink_state", lambda: None)() for layer in layers)
            if s is not None]


def _same_states(a: list, b: list) -> bool:
    return len(a) == len(b) and all(np.array_equal(x, y) for x, y in zip(a, b))


def _prepare_for_check(layers: Sequence) -> bool:
    """Hold dropout masks (and make every layer return its input gradient)."""
    held = False
    for layer in layers:
        if hasattr(layer, "input_grad"):
            layer.input_grad = True
        if hasattr(layer, "hold_mask"):
            layer.hold_mask = True
            held = True
    return held


def _check_tensor(array: np.ndarray, analytic: np.ndarray | None, evaluate: Callable,
                  weight, base_states: list, layers: Sequence, *, layer: str, tensor: str,
                  rng: np.random.Generator, step: float, threshold: float,
                  max_coords: int | None, notes: Sequence[str], scale: float) -> GradRow:
    """Central differences of ``sum(evaluate() * weight)`` over coordinates of ``array``."""
    shape = tuple(array.shape)
    note = list(notes)
    if analytic is None or tuple(np.shape(analytic)) != shape:
        got = "nothing" if analytic is None else f"shape {tuple(np.shape(analytic))}"
        return GradRow(layer, tensor, shape, float("nan"), False,
                       f"backward gave {got} for a tensor of shape {shape}")
    if not array.flags.c_contiguous:
        raise ValueError(f"{layer}/{tensor}: the checker perturbs tensors in place through a "
                         "flat view, so they must be C-contiguous; this one is not")
    size = array.size
    coords = np.arange(size)
    if max_coords is not None and size > max_coords:
        coords = np.sort(rng.choice(size, size=max_coords, replace=False))
        note.append(f"sampled {max_coords} of {size} coordinates")
    flat = array.reshape(-1)  # a view: writes perturb the live tensor
    numeric = np.zeros(coords.size)
    checked = np.zeros(coords.size, dtype=bool)
    skipped = 0
    for k, idx in enumerate(coords):
        old = flat[idx]
        flat[idx] = old + step
        y_plus = np.array(evaluate(), dtype=np.float64)
        plus_states = _kink_states(layers)
        flat[idx] = old - step
        y_minus = np.array(evaluate(), dtype=np.float64)
        minus_states = _kink_states(layers)
        flat[idx] = old
        if not (_same_states(plus_states, base_states)
                and _same_states(minus_states, base_states)):
            skipped += 1
            continue
        numeric[k] = np.sum((y_plus - y_minus) * weight) / (2.0 * step)
        checked[k] = True
    ok = checked
    if skipped:
        note.append(f"{skipped} of {coords.size} coordinates skipped: +h/-h straddle a "
                    "ReLU or max-pool kink")
    if not ok.any():
        note.append("no coordinate away from kinks: nothing checked")
        return GradRow(layer, tensor, shape, float("nan"), False, "; ".join(note))
    a = np.asarray(analytic, dtype=np.float64).reshape(-1)[coords][ok]
    n = numeric[ok]
    if not (np.isfinite(a).all() and np.isfinite(n).all()):
        note.append("non-finite gradient: analytic has "
                    f"{int((~np.isfinite(a)).sum())}, numeric {int((~np.isfinite(n)).sum())} "
                    "non-finite values")
        return GradRow(layer, tensor, shape, float("nan"), False, "; ".join(note))
    own = max(float(np.max(np.abs(a))), float(np.max(np.abs(n))))
    if own < FLOOR_FRACTION * scale:
        note.append(f"gradient is round-off small (max {own:.1e} against {scale:.1e} "
                    "elsewhere): compared on the larger scale")
    err = float(np.max(relative_error(a, n, floor=FLOOR_FRACTION * max(scale, own))))
    return GradRow(layer, tensor, shape, err, bool(err < threshold), "; ".join(note))


def check_layer(layer, x: np.ndarray, *, seed: int = 0, step: float = STEP,
                threshold: float = THRESHOLD, max_coords: int | None = MAX_COORDS,
                check_input: bool = True) -> list[GradRow]:
    """Check one layer's input and parameter gradients against central differences.

    Parameters
    ----------
    layer : Layer
        Any layer keeping the contract of :mod:`tinyconv.layers.base`; it is
        copied and cast to float64, never changed.
    x : ndarray
        An input the layer accepts, e.g. shape (n, h, w, c).
    seed : int
        Seeds the random upstream gradient and the coordinate sampling.
    step : float
        Finite-difference step ``h``.
    threshold : float
        Largest relative error that passes.
    max_coords : int or None
        Check at most this many coordinates per tensor (a seeded sample); None: all.
    check_input : bool
        Also check the gradient with respect to ``x``.

    Returns
    -------
    list of GradRow
        The input first (tensor ``"x"``), then each parameter in ``layer.params`` order.
    """
    rng = _generator(seed)
    layer = copy.deepcopy(layer)
    layer.astype(np.float64)
    notes = ["fixed dropout mask"] if _prepare_for_check([layer]) else []
    x = np.array(x, dtype=np.float64)
    y = layer.forward(x, training=True)
    base_states = _kink_states([layer])
    upstream = rng.standard_normal(y.shape)
    grad_x = layer.backward(upstream.copy())
    grads = {key: None if g is None else np.array(g, dtype=np.float64)
             for key, g in ((k, layer.grads.get(k)) for k in layer.params)}
    evaluate = lambda: layer.forward(x, training=True)  # noqa: E731
    common = dict(rng=rng, step=step, threshold=threshold, max_coords=max_coords, notes=notes,
                  scale=_scale([grad_x] + list(grads.values())))
    rows = []
    if check_input:
        rows.append(_check_tensor(x, grad_x, evaluate, upstream, base_states, [layer],
                                  layer=layer.name, tensor="x", **common))
    for key, array in layer.params.items():
        rows.append(_check_tensor(array, grads[key], evaluate, upstream, base_states, [layer],
                                  layer=layer.name, tensor=key, **common))
    return rows


def check_network(net, x: np.ndarray, y: np.ndarray, *, seed: int = 0, step: float = STEP,
                  threshold: float = THRESHOLD, max_coords: int | None = MAX_COORDS,
                  loss: Callable | None = None, check_input: bool = True) -> list[GradRow]:
    """Check a whole network's gradients through its loss against central differences.

    Parameters
    ----------
    net : Network
        Keeps the contract in DEVELOPERS.md (``forward(x, training)``,
        ``backward(grad_logits)``, ``param_list()``, ``grad_list()``,
        ``layers``); it is copied and cast to float64, never changed.
    x : ndarray, shape (n, h, w, c)
    y : ndarray of int, shape (n,)
        Class labels.
    seed : int
        Seeds the coordinate sampling (the loss gradient is the upstream).
    loss : callable, optional
        ``loss(logits, labels) -> (mean_loss, grad_logits)``; default
        :func:`tinyconv.losses.softmax_cross_entropy`.

    Returns
    -------
    list of GradRow
        The input first (layer ``"input"``, tensor ``"x"``), then one row per
        entry of ``param_list()``, named ``"{index}:{op.name}"`` / key.
    """
    if loss is None:
        from tinyconv.losses import softmax_cross_entropy as loss
    rng = _generator(seed)
    net = copy.deepcopy(net)
    for layer in net.layers:
        layer.astype(np.float64)
    notes = ["fixed dropout mask"] if _prepare_for_check(net.layers) else []
    x = np.array(x, dtype=np.float64)
    labels = np.asarray(y)
    _, grad_logits = loss(net.forward(x, training=True), labels)
    base_states = _kink_states(net.layers)
    grad_x = net.backward(np.asarray(grad_logits, dtype=np.float64))
    names = [name for name, _ in net.param_list()]
    grads = dict(zip(names, (np.array(g, dtype=np.float64) for _, g in net.grad_list())))
    evaluate = lambda: loss(net.forward(x, training=True), labels)[0]  # noqa: E731
    common = dict(rng=rng, step=step, threshold=threshold, max_coords=max_coords, notes=notes,
                  scale=_scale([grad_x] + list(grads.values())))
    rows = []
    if check_input:
        rows.append(_check_tensor(x, grad_x, evaluate, 1.0, base_states, net.layers,
                                  layer="input", tensor="x", **common))
    for name, array in net.param_list():
        layer_name, _, key = name.rpartition("/")
        rows.append(_check_tensor(array, grads.get(name), evaluate, 1.0, base_states,
                                  net.layers, layer=layer_name, tensor=key, **common))
    return rows


def check_joining(layer, xs: Sequence[np.ndarray], *, seed: int = 0, step: float = STEP,
                  threshold: float = THRESHOLD,
                  max_coords: int | None = MAX_COORDS) -> list[GradRow]:
    """Check a layer of several inputs (``layer.arity``; the residual addition, the
    channel stacking) against central differences, one row per input.

    ``layer.forward_all(xs, training)`` is checked through ``sum(y * G)`` with a
    random upstream ``G``, like :func:`check_layer`; ``layer.backward(G)`` must
    return one gradient per input. Rows are named ``x0``, ``x1``, ...
    """
    rng = _generator(seed)
    layer = copy.deepcopy(layer)
    xs = [np.array(x, dtype=np.float64) for x in xs]
    y = layer.forward_all(xs, training=True)
    upstream = rng.standard_normal(y.shape)
    grads = layer.backward(upstream.copy())
    evaluate = lambda: layer.forward_all(xs, training=True)  # noqa: E731
    common = dict(rng=rng, step=step, threshold=threshold, max_coords=max_coords, notes=[],
                  scale=_scale(list(grads)))
    return [_check_tensor(x, g, evaluate, upstream, [], [layer], layer=layer.name,
                          tensor=f"x{k}", **common) for k, (x, g) in enumerate(zip(xs, grads))]


def check_stacked_input(net, parts: Sequence[np.ndarray], names: Sequence[str],
                        y: np.ndarray, *, seed: int = 0, step: float = STEP,
                        threshold: float = THRESHOLD,
                        max_coords: int | None = MAX_COORDS) -> list[GradRow]:
    """Check the gradient of a network's loss with respect to each stacked input part.

    The network reads the colour planes of several modes stacked along the
    channels (``32x32rgb+hsv``); here the loss is a function of the planes
    ``parts`` (one array per mode, in order) through the stacking op
    (:class:`~tinyconv.layers.merge.Stack`) and the network, and the analytic
    gradient of each part is the stacking op's backward of the network's input
    gradient. One row per part, layer ``"input:{name}"``, tensor ``"x"``.
    """
    from tinyconv.layers.merge import Stack
    from tinyconv.losses import softmax_cross_entropy as loss

    rng = _generator(seed)
    net = copy.deepcopy(net)
    for layer in net.layers:
        layer.astype(np.float64)
    _prepare_for_check(net.layers)
    stack = Stack([p.shape[-1] for p in parts])
    parts = [np.array(p, dtype=np.float64) for p in parts]
    labels = np.asarray(y)
    _, grad_logits = loss(net.forward(stack.forward_all(parts), training=True), labels)
    base_states = _kink_states(net.layers)
    grads = stack.backward(net.backward(np.asarray(grad_logits, dtype=np.float64)))
    evaluate = lambda: loss(net.forward(stack.forward_all(parts), training=True),  # noqa: E731
                            labels)[0]
    # the floor of check_network: the largest gradient of the input and every parameter
    scale = _scale(list(grads) + [np.asarray(g) for _, g in net.grad_list()])
    common = dict(rng=rng, step=step, threshold=threshold, max_coords=max_coords, notes=[],
                  scale=scale)
    return [_check_tensor(p, g, evaluate, 1.0, base_states, net.layers, layer=f"input:{name}",
                          tensor="x", **common) for p, g, name in zip(parts, grads, names)]


def all_passed(rows: Sequence[GradRow]) -> bool:
    """True when every row passed (and there is at least one)."""
    return bool(rows) and all(row.passed for row in rows)
