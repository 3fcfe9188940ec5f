"""The report's colours: one palette, chosen for this project.

Every figure and the HTML page take their colours from here, so a reader
learns them once: held-out accuracy is always the deep ink blue, training
accuracy the light straw, the pick the brick red-brown with a star marker.

The roles were chosen so that

* each pair drawn side by side differs clearly in lightness (CIE L*), so the
  figures read in greyscale and on a monochrome printer;
* no pair relies on a red/green contrast: the hues are blue, straw, brick and
  slate, which stay apart for the common forms of colour-vision deficiency;
* meaning never rests on colour alone: the pick is also a star, budgets are
  dashed, chance is dotted, the front is a stepped line.

The tests check the lightness gaps and simulated colour-vision distances.
"""

from __future__ import annotations

from dataclasses import dataclass

from matplotlib.colors import LinearSegmentedColormap


@dataclass(frozen=True)
class Palette:
    """Named colour roles (hex sRGB)."""

    ink: str = "#1d2230"         # text, axes, spines
    held_out: str = "#263d78"    # held-out (validation) accuracy: dark
    training: str = "#e6b85c"    # training accuracy: light
    pick: str = "#a9452a"        # the chosen candidate: middle-dark, warm
    front: str = "#4f86a6"       # the Pareto front: middle, cool
    other: str = "#a7acb6"       # candidates that are neither front nor pick
    band: str = "#efe4cc"        # the one-standard-error band: very light
    budget: str = "#5b4e6e"      # budget lines (dashed)
    chance: str = "#7d818a"      # chance accuracy 1/K (dotted)
    muted_text: str = "#5c6069"  # secondary text on the page (captions, notes)
    paper: str = "#fbf8f2"       # page and figure background
    rule: str = "#ddd5c5"        # thin rules and grid lines

    def series(self) -> tuple[str, ...]:
        """Colours for up to five unordered series, in order of falling contrast."""
        return (self.held_out, self.training, self.pick, self.front, self.other)


PALETTE = Palette()

# The sequential map for confusion matrices: from the paper colour through a
# muted blue to the held-out ink, so lightness falls monotonically with the
# count (readable in greyscale; no rainbow).
_SEQ = ("#fbf8f2", "#d9e0e6", "#9fb3c9", "#5f7aa6", "#263d78", "#141f42")


def sequential_map() -> LinearSegmentedColormap:
    """The colour map for counts and rates: light (low) to dark (high)."""
    return LinearSegmentedColormap.from_list("tinyconv_seq", list(_SEQ), N=256)


def srgb_to_lightness(hex_colour: str) -> float:
    """CIE 1976 L* (0 black .. 100 white) of an sRGB hex colour.

    Notes
    -----
    sRGB decoding per IEC 61966-2-1; relative luminance Y with the D65 weights
    0.2126, 0.7152, 0.0722; L* = 116 f(Y) - 16 with f the CIE cube root and its
    linear toe below (6/29)^3.
    """
    lin = [_decode(int(hex_colour.lstrip("#")[i:i + 2], 16) / 255.0) for i in (0, 2, 4)]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    eps = (6 / 29) ** 3
    f = y ** (1 / 3) if y > eps else y / (3 * (6 / 29) ** 2) + 4 / 29
    return 116.0 * f - 16.0


def _decode(v: float) -> float:
    """sRGB transfer function inverse (IEC 61966-2-1)."""
    return v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4


def style() -> dict[str, object]:
    """Matplotlib rc settings shared by every figure (use with ``rc_context``)."""
    p = PALETTE
    return {
        "figure.facecolor": "#ffffff",
        "axes.facecolor": "#ffffff",
        "savefig.facecolor": "#ffffff",
        "axes.edgecolor": p.ink,
        "axes.labelcolor": p.ink,
        "axes.titlecolor": p.ink,
        "axes.titlesize": 11,
        "axes.titleweight": "bold",
        "axes.titlelocation": "left",
        "axes.labelsize": 10,
        "axes.spines.top": False,
        "axes.spines.right": False,
        "axes.grid": True,
        "grid.color": p.rule,
        "grid.linewidth": 0.6,
        "xtick.color": p.ink,
        "ytick.color": p.ink,
        "xtick.labelsize": 9,
        "ytick.labelsize": 9,
        "legend.fontsize": 9,
        "legend.frameon": False,
        "font.family": ["DejaVu Sans"],
        "font.size": 10,
        "text.color": p.ink,
        "lines.linewidth": 1.6,
    }
