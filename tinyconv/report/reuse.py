"""Figures drawn once: a report written again over unchanged data reuses its PNGs.

Drawing is most of a report's cost (2-3 CPU-seconds for the demo). The figures
depend only on the run's data as :func:`tinyconv.report.collect.collect`
gives it and on the code that draws them, so :func:`figure_key` digests that
data (ranking, units, the pick's predictions, the images, configuration,
classes, rank order), the report package's source files and the versions of
tinyconv and matplotlib. Beside the figures, :data:`KEY_NAME` records the
key and each PNG's SHA-256; a later report with the same key reuses every PNG
whose file still holds those bytes, and draws the rest (``tinyconv export``
and a second ``tinyconv report`` of a finished run draw nothing).
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np

#: The file beside the figures that records what they were drawn from.
KEY_NAME = "figures.json"


def _digest_frame(h, frame) -> None:
    if frame is None:
        h.update(b"-")
        return
    h.update(frame.to_csv(index=True).encode("utf-8"))


def _digest_array(h, arr) -> None:
    if arr is None:
        h.update(b"-")
        return
    arr = np.ascontiguousarray(arr)
    h.update(f"{arr.dtype.str}{arr.shape}".encode("ascii"))
    h.update(arr.tobytes())


def figure_key(data) -> str:
    """SHA-256 over everything the figures are drawn from (a :class:`RunData`)."""
    import matplotlib

    from tinyconv import __version__

    h = hashlib.sha256()
    h.update(f"tinyconv {__version__} matplotlib {matplotlib.__version__} "
             f"rank {data.rank_by}\n".encode("utf-8"))
    for source in sorted(Path(__file__).parent.glob("*.py")):  # the code that draws
        h.update(source.read_bytes())
    h.update(json.dumps(data.config, sort_keys=True, default=str).encode("utf-8"))
    h.update(json.dumps(list(data.classes)).encode("utf-8"))
    h.update(json.dumps(dict(data.removed), sort_keys=True, default=str).encode("utf-8"))
    _digest_frame(h, data.ranking)
    _digest_frame(h, data.units)
    p = data.predictions
    for arr in ((p.fold, p.index, p.label, p.pred, p.probs) if p is not None else (None,)):
        _digest_array(h, arr)
    _digest_array(h, data.images)
    return h.hexdigest()


def reusable(folder: Path, key: str) -> dict[str, bytes]:
    """PNG bytes of the figures in ``folder`` drawn from data with ``key`` (name -> bytes)."""
    try:
        kept = json.loads((Path(folder) / KEY_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    if not isinstance(kept, dict) or kept.get("key") != key \
            or not isinstance(kept.get("figures"), dict):
        return {}
    out = {}
    for name, sha in kept["figures"].items():
        try:
            png = (Path(folder) / Path(str(name)).name).read_bytes()
        except OSError:
            continue
        if hashlib.sha256(png).hexdigest() == sha:
            out[name] = png
    return out


def record(figures: dict[str, bytes], key: str) -> bytes:
    """The contents of :data:`KEY_NAME` for ``figures`` drawn from data with ``key``."""
    return json.dumps({"key": key,
                       "figures": {n: hashlib.sha256(b).hexdigest()
                                   for n, b in sorted(figures.items())}},
                      indent=1).encode("utf-8")
