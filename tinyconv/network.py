"""A network: the layers built from an architecture, in order, and its files.

:class:`Network` builds one layer per :class:`~tinyconv.arch.Op` of
:func:`tinyconv.arch.expand` and chains their forward and backward passes.
Parameters and state are listed under stable names
``"{index}:{op.name}/{key}"`` (e.g. ``"0:1:c8k3/w"``, ``"5:head:dense/b"``),
the order the optimiser and the files use.

The file format is described in :mod:`tinyconv.network_file`.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np

from tinyconv import arch as arch_mod
from tinyconv import layers as layers_mod
from tinyconv.errors import DataError
from tinyconv.network_file import FORMAT, Saved, mismatch_message, read_entries

# Layers whose forward can apply the ReLU that follows them in the same pass
# (these classes exactly: a subclass may override forward or backward).
_FUSES_RELU = (layers_mod.Conv, layers_mod.Depthwise, layers_mod.Dense)


def _first_weighted(layers: list) -> int | None:
    """Index of the first layer, if only shape-only layers precede it, that can skip its input gradient."""
    for i, layer in enumerate(layers):
        if hasattr(layer, "input_grad"):
            return i
        if not isinstance(layer, layers_mod.Flatten):
            return None
    return None


class Network:
    """Layers built from an architecture, one per expanded op.

    Attributes
    ----------
    arch : Arch
    n_classes : int
    ops : tuple of Op
    layers : list of Layer, one per op
    dtype : numpy dtype
        float32, or float64 for checks: that of the parameters (read from the
        head, so a cast of the layers themselves is seen too).
    """

    def __init__(self, arch: arch_mod.Arch, n_classes: int, ops: tuple[arch_mod.Op, ...],
                 layers: list) -> None:
        self.arch = arch
        self.n_classes = n_classes
        self.ops = ops
        self.layers = layers

    @property
    def dtype(self) -> np.dtype:
        return self.layers[-1].params["w"].dtype

    @classmethod
    def from_arch(cls, arch: arch_mod.Arch | str, n_classes: int, seed: int = 0,
                  dtype=np.float32) -> "Network":
        """Build a network with fresh (He-initialised) weights.

        Parameters
        ----------
        arch : Arch or str
            The architecture or its text form.
        n_classes : int
            Number of classes K (>= 2).
        seed : int
            Seed of the generator every layer draws from (weights, dropout).
        dtype : float32 or float64
        """
        if isinstance(arch, str):
            arch = arch_mod.parse(arch)
        ops = arch_mod.expand(arch, n_classes)
        rng = np.random.default_rng(seed)
        layers = [layers_mod.build(op, rng, np.dtype(dtype)) for op in ops]
        return cls(arch, n_classes, ops, layers)

    def __repr__(self) -> str:
        n = sum(a.size for _, a in self.param_list())
        return (f"Network({str(self.arch)!r}, n_classes={self.n_classes}, params={n}, "
                f"dtype={self.dtype})")

    # ------------------------------------------------------------ passes

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        """Logits of a batch.

        Parameters
        ----------
        x : ndarray, shape (n, h, w, c)
            Images of the network's input shape (cast to its dtype).
        training : bool
            Training mode: dropout on, batch statistics, and every layer keeps
            what ``backward`` needs.

        Returns
        -------
        ndarray, shape (n, K)
        """
        out = self.check_images(x)
        keep, reader = self._skips()
        saved = {-1: out} if -1 in keep else {}
        for step in self._plan():
            layer = self.layers[step[0]]
            if len(step) == 2:  # conv / depthwise / dense with the ReLU after it, in one pass
                out = self.layers[step[1]].adopt(layer.forward(out, training, relu=True),
                                                 training)
            elif step[0] in reader:  # a residual addition: the block's input joins in
                out = layer.forward(out, training, skip=saved.pop(reader[step[0]]))
            else:
                out = layer.forward(out, training)
            if step[-1] in keep:
                saved[step[-1]] = out
        return out

    def _skips(self) -> tuple[frozenset[int], dict[int, int]]:
        """Ops whose outputs a residual addition reads later (-1: the images), and
        per addition the op it reads besides the one before it."""
        reader = {i: reads[1] for i, reads in enumerate(arch_mod.sources(self.ops))
                  if len(reads) == 2}
        return frozenset(reader.values()), reader

    def _plan(self) -> list[tuple[int, ...]]:
        """The passes: ``(i,)`` runs layer i alone, ``(i, i + 1)`` layer i with its ReLU fused.

        Every layer still keeps what its own ``backward`` needs, so each op
        stays visible (and checkable) on its own; fusing only saves passes
        over memory, and ReLU after a bias add gives the same bits either way.
        """
        layers, plan, i = self.layers, [], 0
        keep = self._skips()[0]
        while i < len(layers):
            layer = layers[i]
            nxt = layers[i + 1] if i + 1 < len(layers) else None
            if (isinstance(nxt, layers_mod.ReLU) and not getattr(layer, "relu", True)
                    and type(layer) in _FUSES_RELU and type(nxt) is layers_mod.ReLU
                    and i not in keep):  # a pre-ReLU map a block reads stays visible
                plan.append((i, i + 1))
                i += 2
            else:
                plan.append((i,))
                i += 1
        return plan

    def check_images(self, x: np.ndarray, what: str = "images") -> np.ndarray:
        """``x`` as an array of the network's dtype, after checking its shape.

        Raises
        ------
        DataError
            When ``x`` is not (n, h, w, c) of the network's input, naming both shapes.
        """
        x = np.asarray(x)
        want = tuple(self.arch.input.shape)
        if x.ndim != 4 or tuple(x.shape[1:]) != want:
            raise DataError(f"{what} have shape {x.shape}, but the network {self.arch} reads "
                            f"(n, {', '.join(map(str, want))}); prepare the images to its "
                            "input size and colour mode")
        return np.asarray(x, dtype=self.dtype)

    def backward(self, grad_logits: np.ndarray, input_grad: bool = True) -> np.ndarray | None:
        """Back-propagate ``grad_logits`` (n, K) after a training forward.

        Sets every layer's gradients (see :meth:`grad_list`) and returns the
        gradient with respect to the input images, shape (n, h, w, c).

        ``input_grad=False`` (what training does) lets the first layer with
        weights skip its input gradient, which nobody reads; then None is
        returned. The parameter gradients are the same either way.
        """
        grad = np.asarray(grad_logits, dtype=self.dtype)
        plan = self._plan()
        keep, reader = self._skips()
        pending: dict[int, np.ndarray] = {}  # gradients of block inputs from their additions
        skip = None if input_grad else _first_weighted(self.layers)
        masked = False  # grad already carries the ReLU mask of the fused pass below
        for at in range(len(plan) - 1, -1, -1):
            step = plan[at]
            i = step[0]
            layer = self.layers[i]
            if step[-1] in pending:  # this output also fed an addition: the gradients add up
                grad, masked = grad + pending.pop(step[-1]), False
            if i in reader:
                grad, from_skip = layer.backward(grad)
                src = reader[i]
                pending[src] = pending[src] + from_skip if src in pending else from_skip
                masked = False
                continue
            if i == skip:
                saved, layer.input_grad = layer.input_grad, False
                try:
                    self._backward_step(layer, step, grad, masked)
                finally:
                    layer.input_grad = saved
                return None
            below = plan[at - 1] if at else None
            if below is not None and below[-1] in keep:
                below = None  # its output's gradient gains a term first: no fused masking
            grad, masked = self._backward_step(layer, step, grad, masked, below)
        if -1 in pending:
            grad = grad + pending.pop(-1)
        return grad

    def _backward_step(self, layer, step, grad, masked, below=None):
        """One pass of :meth:`backward`; returns (input gradient, whether it is ReLU-masked)."""
        if len(step) == 2:
            return layer.backward(grad, masked=masked), False
        if type(layer) is layers_mod.MaxPool and below is not None and len(below) == 2:
            # The pool reads a fused ReLU output: route and mask in one pass.
            return layer.backward(grad, relu_mask=True), True
        return layer.backward(grad), False

    # ------------------------------------------------------------ arrays

    def _names(self, i: int, key: str) -> str:
        return f"{i}:{self.ops[i].name}/{key}"

    def param_list(self) -> list[tuple[str, np.ndarray]]:
        """``(name, array)`` of every trained parameter, in layer order (the arrays themselves)."""
        return [(self._names(i, k), a) for i, layer in enumerate(self.layers)
                for k, a in layer.params.items()]

    def grad_list(self) -> list[tuple[str, np.ndarray]]:
        """``(name, gradient)`` in the order of :meth:`param_list`, after a backward."""
        out = []
        for i, layer in enumerate(self.layers):
            for k in layer.params:
                if k not in layer.grads:
                    raise RuntimeError(f"no gradient for {self._names(i, k)}: call backward() "
                                       "after a training forward first")
                out.append((self._names(i, k), layer.grads[k]))
        return out

    def state_list(self) -> list[tuple[str, np.ndarray]]:
        """``(name, array)`` of saved-but-not-trained arrays (batch-norm running statistics)."""
        return [(self._names(i, k), a) for i, layer in enumerate(self.layers)
                for k, a in layer.state.items()]

    def astype(self, dtype) -> "Network":
        """Cast every parameter and state array to ``dtype`` in place; returns ``self``.

        An optimiser made before the cast holds the old arrays: make a new one.
        """
        for layer in self.layers:
            layer.astype(dtype)
        return self

    # ------------------------------------------------------------ files

    def save(self, path: str | os.PathLike, meta: dict | None = None,
             arrays: dict[str, np.ndarray] | None = None) -> Path:
        """Write architecture, weights, state, ``meta`` and extra ``arrays`` to ``path``.

        The file is written under a temporary name and then renamed, so a
        crash never leaves half a file. ``meta`` must be JSON-serialisable.

        Returns
        -------
        Path of the written file (exactly ``path``; no suffix is added).
        """
        path = Path(path)
        try:
            meta_text = json.dumps(meta or {}, sort_keys=True)
        except TypeError as exc:
            raise DataError(f"meta for {path} is not JSON-serialisable: {exc}; "
                            "use plain numbers, strings, lists and dicts") from None
        params, state = self.param_list(), self.state_list()
        entries: dict[str, np.ndarray] = {
            "format": np.array(FORMAT),
            "arch": np.array(str(self.arch)),
            "n_classes": np.array(self.n_classes),
            "meta": np.array(meta_text),
            "param_names": np.array([n for n, _ in params]),
            "state_names": np.array([n for n, _ in state], dtype=str),
        }
        entries.update({f"param/{n}": a for n, a in params})
        entries.update({f"state/{n}": a for n, a in state})
        for key, value in (arrays or {}).items():
            value = np.asarray(value)
            if value.dtype == object:
                raise DataError(f"extra array {key!r} for {path} has dtype object, which "
                                "cannot be saved without pickle; give a numeric array")
            entries[f"extra/{key}"] = value
        from tinyconv.files import write_whole
        # whole or not at all: a full disk leaves the old file and no partial one
        write_whole(path, lambda fh: np.savez(fh, **entries))
        return path

    @staticmethod
    def load(path: str | os.PathLike) -> Saved:
        """Read a file written by :meth:`save`.

        Returns
        -------
        Saved
            The rebuilt network (dtype of the saved parameters), its meta dict
            and extra arrays.

        Raises
        ------
        DataError
            When the file is not a tinyconv network file or is damaged.
        """
        entries = read_entries(path)
        text, n_classes = str(entries["arch"]), int(entries["n_classes"])
        try:
            arch = arch_mod.parse(text)
        except arch_mod.ArchError as exc:
            raise DataError(f"{path}: the saved architecture is not valid: {exc}") from None
        names = [str(n) for n in entries["param_names"]]
        dtype = entries[f"param/{names[0]}"].dtype if names else np.float32
        net = Network.from_arch(arch, n_classes, dtype=dtype)
        net._assign(entries, path)
        meta = json.loads(str(entries["meta"]))
        extra = {k[len("extra/"):]: v for k, v in entries.items() if k.startswith("extra/")}
        return Saved(net, meta, extra)

    def load_weights(self, path: str | os.PathLike) -> None:
        """Copy the parameters and state saved in ``path`` into this network.

        Raises
        ------
        DataError
            Naming the first layer whose tensors do not match (kind or shape),
            with both shapes, when the file holds another architecture.
        """
        self._assign(read_entries(path), path)

    def _assign(self, entries: dict[str, np.ndarray], path) -> None:
        """Check every saved tensor against ours, in order, then copy them in."""
        saved_arch = str(entries["arch"])
        pairs = []
        for group, mine in (("param", self.param_list()), ("state", self.state_list())):
            theirs = [str(n) for n in entries[f"{group}_names"]]
            for j in range(max(len(mine), len(theirs))):
                name, here = mine[j] if j < len(mine) else (None, None)
                other = theirs[j] if j < len(theirs) else None
                there = entries.get(f"{group}/{other}") if other is not None else None
                if other is not None and there is None:
                    raise DataError(f"{path}: damaged file: {group} {other!r} is listed but "
                                    "missing; save the network again")
                same = (name is not None and other is not None
                        and name.rsplit("/", 1)[1] == other.rsplit("/", 1)[1]
                        and here.shape == there.shape)
                if not same:
                    raise DataError(mismatch_message(path, saved_arch, self, group, name,
                                                     here, other, there))
                pairs.append((here, there))
        for here, there in pairs:
            here[...] = there
