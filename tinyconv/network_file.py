"""The file a network is saved in (:meth:`tinyconv.network.Network.save`).

File format (``.npz`` written by :func:`numpy.savez`, read with
``allow_pickle=False``; every entry is a plain array, strings as 0-d unicode
arrays):

=====================  =======================================================
``format``             int, 1
``arch``               the architecture text
``n_classes``          int
``meta``               JSON text of the ``meta`` dict (``{}`` when none)
``param_names``        unicode array of parameter names, in order
``state_names``        unicode array of state names, in order
``param/{name}``       each parameter array
``state/{name}``       each state array (batch-norm running mean and variance)
``extra/{key}``        each extra array (e.g. normalisation mean and std)
=====================  =======================================================
"""

from __future__ import annotations

import zipfile
from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from tinyconv.errors import DataError

if TYPE_CHECKING:
    from tinyconv.network import Network

FORMAT = 1


@dataclass(frozen=True)
class Saved:
    """What :meth:`Network.load` returns: the network, its meta dict and extra arrays."""

    network: "Network"
    meta: dict[str, Any] = field(default_factory=dict)
    arrays: dict[str, np.ndarray] = field(default_factory=dict)


def mismatch_message(path, saved_arch: str, net, group: str, name, here, other,
              there) -> str:
    """The message for the first tensor that does not fit."""
    def describe(n, a):
        if n is None:
            return "nothing"
        layer, key = n.split(":", 1)[1].rsplit("/", 1)
        kind = "parameter" if group == "param" else "state"
        return f"layer {layer} {kind} {key!r} of shape {tuple(a.shape)}"

    return (f"cannot load weights from {path} (architecture {saved_arch!r}) into "
            f"{str(net.arch)!r}: the first mismatch is {describe(name, here)} in this "
            f"network against {describe(other, there)} in the file; build the network "
            "from the saved architecture (Network.load) or load a file of this architecture")


def read_entries(path) -> dict[str, np.ndarray]:
    """Every entry of a network file, checked for the required keys."""
    try:
        with np.load(path, allow_pickle=False) as data:
            entries = {k: data[k] for k in data.files}
    except (ValueError, OSError, EOFError, zipfile.BadZipFile) as exc:
        if isinstance(exc, FileNotFoundError):
            raise
        raise DataError(f"{path} is not a readable .npz network file ({exc}); "
                        "give a file written by Network.save") from None
    need = ("format", "arch", "n_classes", "meta", "param_names", "state_names")
    missing = [k for k in need if k not in entries]
    if missing:
        raise DataError(f"{path} is not a tinyconv network file: it lacks "
                        f"{', '.join(missing)}; give a file written by Network.save")
    if int(entries["format"]) != FORMAT:
        raise DataError(f"{path} has network file format {int(entries['format'])}, "
                        f"but this version reads format {FORMAT}; save it again")
    return entries
