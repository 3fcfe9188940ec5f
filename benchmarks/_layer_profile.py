"""Where one training step's time goes: per layer, per layer kind, and per function.

The network's layers are timed by wrapping each layer object's ``forward``
and ``backward`` (instance attributes, so the engine's code is untouched);
the loss and the optimiser update are timed beside them. A cProfile of a few
unwrapped steps then shows the Python-level functions (a Numba kernel is one
entry). Figures are milliseconds per step, the mean over ``steps`` steps
after a warm-up.
"""

from __future__ import annotations

import cProfile
import contextlib
import importlib
import io
import pstats
import time
import types
from collections import defaultdict

import numpy as np

import _nets
import _timing


#: layer modules whose kernel helpers (functions from :data:`KERNEL_MODULES`) are timed
LAYER_MODULES = ("activation", "conv", "convalg.winograd", "dense", "depthwise", "pool", "norm")
#: the kernel modules: ``tinyconv.layers.kernels_*`` and the convolution algorithms' kernels
KERNEL_MODULES = ("tinyconv.layers.kernels", "tinyconv.layers.convalg.im2col",
                  "tinyconv.layers.convalg.winograd_f")


def _wrap(layer, key: str, acc: dict, where: dict | None = None) -> None:
    """Replace ``layer.forward``/``backward`` with timed calls adding seconds to ``acc``.

    ``where["at"]`` is set to ``(key, "fwd"|"bwd")`` during each call, so kernel
    timers (see :func:`timed_kernels`) know which layer called them.
    """
    where = {} if where is None else where

    def timed(method, pas: str):
        def call(*args, **kwargs):
            where["at"] = (key, pas)
            t = time.perf_counter()
            out = method(*args, **kwargs)
            acc[key][pas] += time.perf_counter() - t
            return out
        return call

    # adopt: a ReLU taking the output of a fused layer before it (forward time).
    for attr, pas in (("forward", "fwd"), ("adopt", "fwd"), ("backward", "bwd")):
        if hasattr(layer, attr):
            setattr(layer, attr, timed(getattr(layer, attr), pas))


def _is_kernels(module_name: str) -> bool:
    """Whether a module holds kernels (a name starting with one of :data:`KERNEL_MODULES`)."""
    return module_name.startswith(KERNEL_MODULES)


@contextlib.contextmanager
def timed_kernels(where: dict, acc: dict):
    """Time every kernel helper the layer modules call, per calling layer and pass.

    The helpers are replaced in the layer modules' namespaces for the duration
    of the ``with`` block only (the engine's files are not changed); seconds go
    to ``acc[(layer key, pass, function name)]``.
    """
    saved = []
    targets = []
    for short in LAYER_MODULES:
        mod = importlib.import_module(f"tinyconv.layers.{short}")
        for name, fn in list(vars(mod).items()):
            if callable(fn) and _is_kernels(getattr(fn, "__module__", "")):
                targets.append((mod, name, fn))
            elif isinstance(fn, types.ModuleType) and _is_kernels(fn.__name__):
                # A kernel module used by attribute (``kw.input_transform``).
                targets += [(fn, n, f) for n, f in list(vars(fn).items())
                            if callable(f) and getattr(f, "__module__", "") == fn.__name__]
    for mod, name, fn in targets:
        def timed(*a, _fn=fn, _name=name, **k):
            t = time.perf_counter()
            out = _fn(*a, **k)
            key, pas = where.get("at", ("?", "?"))
            acc[(key, pas, _name)] += time.perf_counter() - t
            return out

        saved.append((mod, name, fn))
        setattr(mod, name, timed)
    try:
        yield
    finally:
        for mod, name, fn in saved:
            setattr(mod, name, fn)


def kernel_times(name: str, steps: int = 20) -> dict:
    """Per layer of one training step: seconds in each kernel helper, and the rest.

    "rest" is the layer's time outside the helpers: the BLAS matrix products
    written as ``@`` / ``np.matmul`` and NumPy calls in the layer's own code.

    Returns
    -------
    dict
        ``rows``: (index, op name, kind, pass, {helper: s}, rest s, total s) per step.
    """
    text = _nets.REFERENCE[name][0]
    x, y = _nets.random_batch(text, _nets.TRAIN_BATCH, seed=1)
    net = _nets.ours_network(text)
    layer_acc: dict = defaultdict(lambda: {"fwd": 0.0, "bwd": 0.0})
    kern_acc: dict = defaultdict(float)
    where: dict = {}
    for i, layer in enumerate(net.layers):
        _wrap(layer, str(i), layer_acc, where)
    step = _nets.ours_train_step(net, x, y)
    with timed_kernels(where, kern_acc):
        _timing.warm_up(step, 3, 0.2)
        layer_acc.clear()
        kern_acc.clear()
        _timing.time_block(step, steps)
    rows = []
    for i, op in enumerate(net.ops):
        for pas in ("fwd", "bwd"):
            total = layer_acc[str(i)][pas] / steps
            parts = {fn: sec / steps for (k, p, fn), sec in kern_acc.items()
                     if k == str(i) and p == pas}
            rows.append((i, op.name, op.kind, pas, parts, total - sum(parts.values()), total))
    return {"net": name, "rows": rows}


def _kernel_table(t: dict) -> list[str]:
    lines = [f"{t['net']} train, inside each layer (ms per step; rest = BLAS products and "
             "NumPy in the layer's own code):"]
    for i, name, kind, pas, parts, rest, total in t["rows"]:
        if total < 5e-5:
            continue
        inner = ", ".join(f"{fn} {sec * 1000:.2f}" for fn, sec in
                          sorted(parts.items(), key=lambda kv: -kv[1]))
        lines.append(f"  {i:>3} {name:<14}{kind:<9}{pas}  {total * 1000:7.2f} = "
                     + (inner + ", " if inner else "") + f"rest {rest * 1000:.2f}")
    return lines


def conv_gemm_shapes(name: str, repeats: int = 7) -> list[str]:
    """Each conv's three matrix products, timed alone at the training batch's shapes.

    Forward ``cols (M, K) @ w (K, f)``, weight gradient ``cols.T @ g`` and
    column gradient ``g @ w.T``, with ``M = n oh ow`` rows and ``K = k k c_in``,
    the shapes the im2col convolution hands to BLAS; median milliseconds and
    GFLOP/s (``2 M K f`` FLOPs each).
    """
    from tinyconv.arch import expand, parse

    rng = np.random.default_rng(0)
    lines = [f"{name} conv matrix products alone (batch {_nets.TRAIN_BATCH}, median of {repeats}):"]
    for op in expand(parse(_nets.REFERENCE[name][0]), _nets.N_CLASSES):
        if op.kind != "conv":
            continue
        (oh, ow, f), k, c = op.out_shape, op.kernel, op.in_shape[2]
        m, kk = _nets.TRAIN_BATCH * oh * ow, k * k * c
        cols = rng.standard_normal((m, kk), dtype=np.float32)
        w = rng.standard_normal((kk, f), dtype=np.float32)
        g = rng.standard_normal((m, f), dtype=np.float32)
        flops = 2.0 * m * kk * f
        parts = []
        for label, fn in (("fwd cols@w", lambda: cols @ w), ("wgrad cols.T@g", lambda: cols.T @ g),
                          ("colgrad g@w.T", lambda: g @ w.T)):
            fn()
            secs = []
            for _ in range(repeats):
                t = time.perf_counter()
                fn()
                secs.append(time.perf_counter() - t)
            sec = float(np.median(secs))
            parts.append(f"{label} {sec * 1000:.2f} ms ({flops / sec / 1e9:.0f} GFLOP/s)")
        lines.append(f"  {op.name:<9} M={m:,} K={kk} f={f}: " + "; ".join(parts))
    return lines


def layer_times(name: str, steps: int = 20, mode: str = "train") -> dict:
    """Mean seconds per step of each layer's forward and backward, the loss and the update.

    Returns
    -------
    dict
        ``rows``: list of (index, op name, kind, out shape, fwd s, bwd s);
        ``loss_s``, ``update_s``, ``step_s`` (wrapped whole step), ``plain_step_s``
        (the same step unwrapped, to show the wrappers cost nothing that matters).
    """
    from tinyconv.losses import softmax_cross_entropy
    from tinyconv.optim import SGD

    text = _nets.REFERENCE[name][0]
    batch = _nets.TRAIN_BATCH if mode == "train" else _nets.INFER_BATCH
    x, y = _nets.random_batch(text, batch, seed=1)

    plain_net = _nets.ours_network(text)
    plain = (_nets.ours_train_step(plain_net, x, y) if mode == "train"
             else _nets.ours_infer_step(plain_net, x))
    _timing.warm_up(plain, 3, 0.2)
    plain_s = _timing.time_block(plain, steps) / steps

    net = _nets.ours_network(text)
    acc: dict = defaultdict(lambda: {"fwd": 0.0, "bwd": 0.0})
    keys = []
    for i, (op, layer) in enumerate(zip(net.ops, net.layers)):
        key = f"{i}"
        keys.append((key, op))
        _wrap(layer, key, acc)
    opt = SGD(net.param_list(), momentum=_nets.MOMENTUM)
    backward = _nets.training_backward(net)
    extra = {"loss": 0.0, "update": 0.0}

    def step():
        logits = net.forward(x, training=mode == "train")
        if mode != "train":
            return
        t = time.perf_counter()
        _, grad = softmax_cross_entropy(logits, y)
        extra["loss"] += time.perf_counter() - t
        backward(grad)
        t = time.perf_counter()
        opt.update([g for _, g in net.grad_list()], _nets.LR)
        extra["update"] += time.perf_counter() - t

    _timing.warm_up(step, 3, 0.2)
    acc.clear()
    extra.update(loss=0.0, update=0.0)
    wrapped_s = _timing.time_block(step, steps) / steps
    rows = [(i, op.name, op.kind, "x".join(map(str, op.out_shape)),
             acc[key]["fwd"] / steps, acc[key]["bwd"] / steps)
            for i, (key, op) in enumerate(keys)]
    return {"net": name, "mode": mode, "batch": batch, "rows": rows,
            "loss_s": extra["loss"] / steps, "update_s": extra["update"] / steps,
            "step_s": wrapped_s, "plain_step_s": plain_s}


def by_kind(times: dict) -> dict[str, tuple[float, float]]:
    """Forward and backward seconds per step summed over layers of each kind."""
    out: dict[str, list[float]] = defaultdict(lambda: [0.0, 0.0])
    for _, _, kind, _, f, b in times["rows"]:
        out[kind][0] += f
        out[kind][1] += b
    return {k: (v[0], v[1]) for k, v in out.items()}


def top_functions(name: str, steps: int = 5, limit: int = 22) -> str:
    """cProfile of ``steps`` unwrapped training steps, sorted by own time."""
    text = _nets.REFERENCE[name][0]
    x, y = _nets.random_batch(text, _nets.TRAIN_BATCH, seed=1)
    step = _nets.ours_train_step(_nets.ours_network(text), x, y)
    _timing.warm_up(step, 3, 0.2)
    prof = cProfile.Profile()
    prof.enable()
    for _ in range(steps):
        step()
    prof.disable()
    buf = io.StringIO()
    pstats.Stats(prof, stream=buf).sort_stats("tottime").print_stats(limit)
    lines = [ln for ln in buf.getvalue().splitlines() if ln.strip()]
    start = next((i for i, ln in enumerate(lines) if ln.lstrip().startswith("ncalls")), 0)
    return "\n".join(lines[start:])


def _table(t: dict) -> list[str]:
    ms = 1000.0
    lines = [f"{t['net']} {t['mode']} (batch {t['batch']}, 1 thread): step "
             f"{t['step_s'] * ms:.2f} ms wrapped, {t['plain_step_s'] * ms:.2f} ms plain "
             f"({t['batch'] / t['plain_step_s']:,.0f} img/s)",
             f"  {'#':>3} {'op':<14}{'kind':<9}{'out':<11}{'fwd ms':>9}{'bwd ms':>9}{'share':>8}"]
    for i, name, kind, shape, f, b in t["rows"]:
        lines.append(f"  {i:>3} {name:<14}{kind:<9}{shape:<11}{f * ms:>9.2f}{b * ms:>9.2f}"
                     f"{(f + b) / t['step_s']:>8.1%}")
    if t["mode"] == "train":
        lines.append(f"      {'loss':<34}{t['loss_s'] * ms:>9.2f}{'':>9}"
                     f"{t['loss_s'] / t['step_s']:>8.1%}")
        lines.append(f"      {'SGD update':<34}{t['update_s'] * ms:>9.2f}{'':>9}"
                     f"{t['update_s'] / t['step_s']:>8.1%}")
    lines.append("  by kind: " + "; ".join(
        f"{k} {f * ms:.2f}+{b * ms:.2f} ms ({(f + b) / t['step_s']:.0%})"
        for k, (f, b) in sorted(by_kind(t).items(), key=lambda kv: -sum(kv[1]))))
    return lines


def report(name: str, steps: int = 20) -> str:
    """The printed profile of one network: per layer, per kernel, products, variants, cProfile."""
    import _whatif

    lines = _table(layer_times(name, steps, "train")) + [""]
    lines += _table(layer_times(name, max(steps // 4, 2), "infer")) + [""]
    lines += _kernel_table(kernel_times(name, steps)) + [""]
    lines += conv_gemm_shapes(name) + [""]
    lines += _whatif.compare(name, repeats=5 if steps >= 20 else 1, min_steps=steps) + [""]
    lines += [f"{name} training, cProfile of 5 steps (own time first):", top_functions(name), ""]
    return "\n".join(lines)
