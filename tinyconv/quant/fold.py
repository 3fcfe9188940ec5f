"""From the Ops of a network to the steps a device runs, with batch norm folded.

A deployed network runs *steps*: the ops that write a new buffer (conv,
dwconv, dense, maxpool, avgpool, gap; see the peak-memory definition in
DEVELOPERS.md). Everything else disappears into a step:

* batch norm directly after a conv, dwconv or dense layer is folded into its
  weights and bias: with ``a = gamma / sqrt(var + eps)`` per output channel,
  ``w' = w a`` and ``b' = (b - mean) a + beta``, so ``bn(conv(x)) = conv'(x)``
  exactly in real arithmetic (common practice; Jacob et al., CVPR 2018, §3.2);
* ReLU becomes the lower end of the step's output clamp;
* dropout is the identity at inference;
* flatten is a new name for the same bytes (NHWC order is kept).

A residual block's ``add`` is a step of its own that reads two tensors: the
output of the step before it and the block's input (:attr:`Step.skip`).

Batch norm anywhere else (after pooling, dropout, another batch norm or the
input) has no layer to fold into and is refused with the position and the fix.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tinyconv.arch import ArchError, Op
from tinyconv.ops import sources

#: how an op folds into the steps (its kind's ``StepKind.fold``, :mod:`tinyconv.quant.kinds`):
#: a step with weights; a step without; a batch norm folded into the weighted step before
#: it; the ReLU clamp of the step before; an identity at inference (dropout, flatten)
WEIGHTED, STEP, BATCH_NORM, RELU, IDENTITY = "weighted", "step", "batch_norm", "relu", "identity"


@dataclass(frozen=True, eq=False)
class Step:
    """One buffer-writing step of the deployed network (float, folded).

    Attributes
    ----------
    kind : str
        ``conv``, ``dwconv``, ``dense``, ``maxpool``, ``avgpool``, ``gap`` or ``add``.
    op : Op
        The op that writes the buffer (shapes, kernel, stride, pads).
    index : int
        Its index in ``expand(...)``.
    covers : tuple of int
        Indices of every op merged into this step (itself, then bn, relu,
        dropout, flatten that follow or precede it).
    w : ndarray or None
        float64 weights in the layer's own layout (conv ``(k, k, c_in, f)``,
        dwconv ``(k, k, c)``, dense ``(n_in, n_out)``), batch norm folded in.
    b : ndarray or None, shape (f,)
        float64 bias, batch norm folded in.
    relu : bool
        Whether a ReLU follows (clamp at real 0).
    skip : int or None
        For an ``add``: the index of the step whose output is the block's input
        (-1: the network's input); None for the other kinds. Every step also
        reads the output of the step before it (the first: the input).
    """

    kind: str
    op: Op
    index: int
    covers: tuple[int, ...]
    w: np.ndarray | None = None
    b: np.ndarray | None = None
    relu: bool = False
    skip: int | None = None


def fold_batch_norm(w: np.ndarray, b: np.ndarray, gamma: np.ndarray, beta: np.ndarray,
                    mean: np.ndarray, var: np.ndarray, eps: float) -> tuple[np.ndarray, np.ndarray]:
    """Fold ``y = gamma (z - mean) / sqrt(var + eps) + beta`` into ``z = x w + b``.

    Parameters
    ----------
    w : ndarray, shape (..., f)
        Weights with the output channel last (conv, dwconv and dense all are).
    b, gamma, beta, mean, var : ndarray, shape (f,)
    eps : float
        The batch norm's variance epsilon.

    Returns
    -------
    (w', b') : float64 arrays of the same shapes.
    """
    a = np.asarray(gamma, np.float64) / np.sqrt(np.asarray(var, np.float64) + eps)
    w2 = np.asarray(w, np.float64) * a
    b2 = (np.asarray(b, np.float64) - mean) * a + np.asarray(beta, np.float64)
    return w2, b2


def build_steps(ops: tuple[Op, ...], params: list[dict[str, np.ndarray]],
                eps: list[float | None], arch_text: str = "") -> tuple[Step, ...]:
    """Merge ``ops`` into deployable :class:`Step` s.

    Parameters
    ----------
    ops : tuple of Op
        From :func:`tinyconv.arch.expand`.
    params : list of dict, one per op
        The op's parameters and state by name (``w``, ``b``; ``gamma``,
        ``beta``, ``mean``, ``var`` for batch norm); empty for the others.
    eps : list of float or None, one per op
        The variance epsilon of each batch norm op (None elsewhere).
    arch_text : str
        For error messages.

    Raises
    ------
    ArchError
        For a batch norm that does not directly follow conv, dwconv or dense.
    """
    if len(params) != len(ops) or len(eps) != len(ops):
        raise ValueError(f"need one parameter dict and eps per op: {len(ops)} ops, "
                         f"{len(params)} dicts, {len(eps)} eps")
    # A step is "open" while a batch norm or ReLU may still fold into it: right
    # after its conv/dwconv/dense op, and after a folded batch norm.
    steps: list[dict] = []
    pending: list[int] = []  # ops seen before the first step (dropout on the input)
    from tinyconv.quant.kinds import step_kind  # the table imports this module: read at call time
    reads = sources(ops)
    for i, op in enumerate(ops):
        last = steps[-1] if steps else None
        role = step_kind(op.kind).fold
        if role == WEIGHTED:
            p = params[i]
            steps.append(dict(kind=op.kind, op=op, index=i, covers=pending + [i],
                              w=np.asarray(p["w"], np.float64).copy(),
                              b=np.asarray(p["b"], np.float64).copy(), relu=False,
                              open=True, skip=None))
            pending = []
        elif role == STEP:
            skip = None
            if len(reads[i]) == 2:  # an add: the step whose covers hold the block's input (-1: none)
                src = reads[i][1]
                skip = next((j for j, st in enumerate(steps) if src in st["covers"]), -1)
            steps.append(dict(kind=op.kind, op=op, index=i, covers=pending + [i], w=None,
                              b=None, relu=False, open=False, skip=skip))
            pending = []
        elif role == BATCH_NORM:
            prev = ops[i - 1] if i else None
            if last is None or not last["open"] or prev is None \
                    or step_kind(prev.kind).fold != WEIGHTED:
                after = f"{prev.token or prev.kind!r}" if prev is not None else "the input"
                raise ArchError(
                    f"{arch_text!r}: layer {op.position} 'bn' follows {after}, not a "
                    "convolution, depthwise convolution or dense layer, so it cannot be "
                    "folded for int8 export; move the 'bn' directly after a c/dw/d layer "
                    "or remove it", text=arch_text, position=op.position, token=op.token)
            p = params[i]
            last["w"], last["b"] = fold_batch_norm(last["w"], last["b"], p["gamma"], p["beta"],
                                                   p["mean"], p["var"], float(eps[i]))
            last["covers"].append(i)
        elif role == RELU:
            if last is None or not last["open"] or last["relu"]:
                raise ValueError(f"op {i} relu does not follow a conv, dwconv or dense layer; "
                                 "expand() never makes such a network")
            last["relu"] = True
            last["covers"].append(i)
        elif role == IDENTITY:
            if last is None:
                pending.append(i)
            else:
                last["open"] = False
                last["covers"].append(i)
        else:
            raise ValueError(f"op {i} kind {op.kind!r}: fold role {role!r} is not one of "
                             f"{', '.join((WEIGHTED, STEP, BATCH_NORM, RELU, IDENTITY))}")
    return tuple(Step(kind=s["kind"], op=s["op"], index=s["index"], covers=tuple(s["covers"]),
                      w=s["w"], b=s["b"], relu=s["relu"], skip=s["skip"]) for s in steps)


def run_graph(steps, x, run, keep: bool = False):
    """Run ``steps`` in order, each through ``run(step, x, skip)``, and hold each block's
    input until its addition (``skip`` is None for the other steps).

    Returns the last output, or every step's output when ``keep``.
    """
    wanted = {s.skip for s in steps if s.skip is not None}
    held = {-1: x} if -1 in wanted else {}
    outs = []
    for j, step in enumerate(steps):
        x = run(step, x, None if step.skip is None else held[step.skip])
        if j in wanted:
            held[j] = x
        if keep:
            outs.append(x)
    return outs if keep else x


def network_steps(net) -> tuple[Step, ...]:
    """:func:`build_steps` for a :class:`tinyconv.network.Network`.

    Reads each layer's ``params`` and ``state`` and each batch norm's ``eps``.
    """
    params = [{**layer.params, **layer.state} for layer in net.layers]
    eps = [float(layer.eps) if op.kind == "bn" else None for op, layer in zip(net.ops, net.layers)]
    return build_steps(tuple(net.ops), params, eps, arch_text=str(net.arch))
