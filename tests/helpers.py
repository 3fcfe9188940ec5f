"""Shared test helpers: Ops with computed shapes, seeded inputs."""

from __future__ import annotations

import numpy as np

from tinyconv.arch import Op, conv_output


def conv_op(h: int, w: int, c: int, filters: int, kernel: int, stride: int = 1,
            valid: bool = False, kind: str = "conv", position: int = 1) -> Op:
    """An Op for a conv (or ``kind='dwconv'``) on an ``h x w x c`` map, pads as in arch.expand."""
    oh, pt, pb = conv_output(h, kernel, stride, valid)
    ow, pl, pr = conv_output(w, kernel, stride, valid)
    f = filters if kind == "conv" else c
    token = (f"c{f}k{kernel}" if kind == "conv" else f"dw{kernel}") + \
        ("s2" if stride == 2 else "") + ("v" if valid else "")
    return Op(kind, (h, w, c), (oh, ow, f), position, token, filters=f, kernel=kernel,
              stride=stride, padding="valid" if valid else "same", pads=(pt, pb, pl, pr))


def pool_op(h: int, w: int, c: int, size: int, kind: str = "maxpool") -> Op:
    """An Op for max or average pooling of size = stride ``size``."""
    token = ("p" if kind == "maxpool" else "a") + str(size)
    return Op(kind, (h, w, c), (h // size, w // size, c), 1, token, size=size, stride=size)


def simple_op(kind: str, in_shape: tuple[int, ...], out_shape: tuple[int, ...] | None = None,
              **fields) -> Op:
    """An Op of any other kind (shapes as given; ``out_shape`` defaults to ``in_shape``)."""
    return Op(kind, tuple(in_shape), tuple(out_shape or in_shape), 1, kind, **fields)


def randn(shape: tuple[int, ...], seed: int = 0, dtype=np.float64) -> np.ndarray:
    """Seeded standard-normal array."""
    return np.random.default_rng(seed).standard_normal(shape).astype(dtype)


def distinct(shape: tuple[int, ...], seed: int = 0, gap: float = 1e-2) -> np.ndarray:
    """Seeded float64 array whose values differ pairwise by at least ``gap`` (no ties, no zeros).

    Used where kinks matter (max pooling, ReLU): a shuffled arithmetic sequence
    centred away from zero.
    """
    size = int(np.prod(shape))
    values = (np.arange(size) - size / 2 + 0.5) * gap
    return np.random.default_rng(seed).permutation(values).reshape(shape)


# A tiny search for the search tests: 6 tile images per class at 8x8 and six
# candidates (8x8gray, 8x8gray/d8, c2k3-p2, c2k3-p2-d8, c4k3-p2, c4k3-p2-d8).
TINY_DATA = "builtin:tiles?n=6&size=8&seed=1"
TINY_SPACE = """
[input]
sizes = [8]
modes = ["gray"]

[stages]
count = [0, 1]
filters = [2, 4]

[head]
kind = ["flatten"]
hidden = [0, 8]
"""


def randomise_biases_and_norms(net, rng, *, shift_sd: float, var_range: tuple[float, float],
                               bias_sd: float):
    """Give every bias and batch norm non-trivial values (a fresh net has 0 and 1).

    Batch norm: gamma ~ U(0.5, 2), beta and the running mean ~ N(0, shift_sd^2),
    the running variance ~ U(var_range); biases ~ N(0, bias_sd^2). Draws from
    ``rng`` (a numpy Generator) in layer order; returns ``net``.
    """
    for op, layer in zip(net.ops, net.layers):
        if op.kind == "bn":
            c = layer.params["gamma"].shape[0]
            layer.params["gamma"][:] = rng.uniform(0.5, 2.0, c)
            layer.params["beta"][:] = rng.normal(0, shift_sd, c)
            layer.state["mean"][:] = rng.normal(0, shift_sd, c)
            layer.state["var"][:] = rng.uniform(*var_range, c)
        if "b" in layer.params:
            layer.params["b"][:] = rng.normal(0, bias_sd, layer.params["b"].shape)
    return net


def tiny_request(out, **change):
    """A SearchRequest of the tiny search (TINY_DATA, TINY_SPACE; in-process unless
    ``workers`` is given) with ``change`` applied."""
    from search.session import SearchRequest
    base = dict(data=TINY_DATA, space=TINY_SPACE, out=out, folds=3, seed=2, top_epochs=3,
                workers=0, training={"batch_size": 16, "lr": 0.01})
    base.update(change)
    return SearchRequest(**base)


def units_stored(path) -> int:
    """Units a run store holds so far, read while a search writes (0 when busy or absent)."""
    import sqlite3

    try:
        con = sqlite3.connect(f"file:{path}?mode=ro", uri=True, timeout=1)
        try:
            return con.execute("SELECT COUNT(*) FROM units").fetchone()[0]
        finally:
            con.close()
    except sqlite3.Error:
        return 0


def walk_peak(ops, in_shape, scratch=lambda op: 0) -> int:
    """Peak activation memory by walking live ranges, written apart from the package.

    Each op that writes a buffer (every kind but relu, bn, dropout and flatten,
    which work in place) makes a tensor; an op reads the tensor of the op
    before it, and an ``add`` also that of the op ``reach + 1`` before it. A
    tensor is alive from its writer to its last reader; at each writing step
    the alive tensors' elements are summed with ``scratch(op)``. The input
    tensor is written by the input step, where it is alone.
    """
    in_place = {"relu", "bn", "dropout", "flatten"}
    holder = {-1: "in"}  # op index -> id of the tensor its output is
    size = {"in": int(np.prod(in_shape))}
    born, last = {"in": -1}, {"in": -1}
    for i, op in enumerate(ops):
        read = [holder[i - 1]] + ([holder[i - 1 - op.reach]] if op.kind == "add" else [])
        for t in read:
            last[t] = i
        if op.kind in in_place:
            holder[i] = holder[i - 1]
        else:
            holder[i] = f"t{i}"
            size[holder[i]] = int(np.prod(op.out_shape))
            born[holder[i]] = last[holder[i]] = i
    best = size["in"]
    for i, op in enumerate(ops):
        if op.kind not in in_place:
            alive = sum(size[t] for t in size if born[t] <= i <= last[t])
            best = max(best, alive + scratch(op))
    return best
