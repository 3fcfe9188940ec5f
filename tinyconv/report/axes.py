"""Small helpers shared by the figure modules: number formats, log decision, saving."""

from __future__ import annotations

import io
import math
from pathlib import Path
from typing import Sequence

import numpy as np
from matplotlib.figure import Figure
from matplotlib.ticker import FuncFormatter

from tinyconv.report.palette import PALETTE

# A parameter or MAC axis goes to log scale when its values span at least one
# decade (a factor of 10): then equal ratios look equal, and a linear axis
# would crowd the small candidates into one corner.
LOG_SPAN = 10.0


def spans_decades(values: Sequence[float]) -> bool:
    """True when max/min of the positive values is at least :data:`LOG_SPAN`."""
    v = np.asarray([x for x in values if x and x > 0], dtype=float)
    return v.size >= 2 and float(v.max() / v.min()) >= LOG_SPAN


def si(x: float, _pos: object = None, *, digits: int = 2) -> str:
    """Compact count: 950, 1.2k, 34k, 1.5M (for ticks and labels).

    ``digits=3`` keeps three significant digits (1.37k, 1.42k) where nearby
    values must stay apart, e.g. as category labels.
    """
    x = float(x)
    if not math.isfinite(x):
        return str(x)
    if x and abs(x - round(x)) <= 1e-9 * abs(x):  # 199.99999999 from 10**log10(200)
        x = float(round(x))
    a = abs(x)
    for div, suffix in ((1e9, "G"), (1e6, "M"), (1e3, "k")):
        if a >= div * 0.9995:
            v = x / div
            if digits >= 3:
                return f"{float(f'{v:.{digits}g}'):g}{suffix}"
            return (f"{v:.0f}{suffix}" if abs(v) >= 10 or abs(v - round(v)) < 0.05
                    else f"{v:.1f}{suffix}")
    if x == int(x):
        return f"{x:.0f}"
    return f"{x:.2f}".rstrip("0").rstrip(".")


SI_FORMAT = FuncFormatter(si)
PERCENT_FORMAT = FuncFormatter(lambda y, _p: f"{100 * y:.0f}%")


# Figures are drawn at 1.5 CSS pixels per pixel, so they stay sharp on the page
# (which shows them at DPI / SCREEN_DPI of their pixel size) and on high-density screens.
DPI = 144
SCREEN_DPI = 96


def new_figure(width: float, height: float) -> Figure:
    """A figure of ``width`` x ``height`` inches, not attached to pyplot.

    Nothing is shown and nothing is kept in a global figure list.
    """
    return Figure(figsize=(width, height), dpi=DPI, layout="constrained")


def chance_line(ax, chance: float | None, *, horizontal: bool = True) -> None:
    """Dotted reference line at chance accuracy 1/K, labelled."""
    if chance is None or not math.isfinite(chance):
        return
    if horizontal:
        ax.axhline(chance, color=PALETTE.chance, linestyle=":", linewidth=1.2,
                   label=f"chance 1/K = {100 * chance:.1f}%", zorder=1)
    else:
        ax.axvline(chance, color=PALETTE.chance, linestyle=":", linewidth=1.2, zorder=1)


#: zlib level of the PNG figures: 1 writes them several times faster than the
#: default 6, and these flat-coloured plots come out about as small (within a few
#: per cent; the photo galleries about 15 % larger).
PNG_LEVEL = 1


def png_bytes(fig: Figure) -> bytes:
    """The figure as PNG bytes: rendered by Agg at the figure's DPI, 8-bit RGB.

    The figures are opaque (white background), so the alpha channel, which
    would carry no information, is left out; any pixel that is not opaque is
    laid over white first.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    rgba = np.asarray(canvas.buffer_rgba())
    alpha = rgba[..., 3:]
    if alpha.min() == 255:
        rgb = np.ascontiguousarray(rgba[..., :3])
    else:
        rgb = (rgba[..., :3] * (alpha / 255.0) + 255.0 * (1 - alpha / 255.0)).round() \
            .astype(np.uint8)
    buf = io.BytesIO()
    Image.fromarray(rgb, "RGB").save(buf, format="png", compress_level=PNG_LEVEL)
    return buf.getvalue()


def save_png(fig: Figure, path: Path) -> bytes:
    """Write the figure to ``path`` as PNG and return the bytes written."""
    data = png_bytes(fig)
    Path(path).write_bytes(data)
    return data
