"""Tests of the report's palette: greyscale and colour-vision readability."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from tinyconv.report.palette import PALETTE, sequential_map, srgb_to_lightness

# Pairs of roles that appear next to each other in one figure.
SIDE_BY_SIDE = [
    ("held_out", "training"),            # fold boxes, learning curves
    ("pick", "front"), ("pick", "other"), ("front", "other"),   # Pareto markers
    ("pick", "band"), ("front", "band"), ("other", "band"),     # markers over the band
    ("budget", "band"), ("chance", "band"),
    ("held_out", "paper"), ("training", "paper"),
]

# Machado, Oliveira & Fernandes, "A physiologically-based model for simulation
# of color vision deficiency", IEEE TVCG 15(6), 2009: severity-1.0 matrices,
# applied to linear RGB [from memory].
MACHADO = {
    "protanopia": np.array([[0.152286, 1.052583, -0.204868],
                            [0.114503, 0.786281, 0.099216],
                            [-0.003882, -0.048116, 1.051998]]),
    "deuteranopia": np.array([[0.367322, 0.860646, -0.227968],
                              [0.280085, 0.672501, 0.047413],
                              [-0.011820, 0.042940, 0.968881]]),
    "tritanopia": np.array([[1.255528, -0.076749, -0.178779],
                            [-0.078411, 0.930809, 0.147602],
                            [0.004733, 0.691367, 0.303900]]),
}


def _linear(hex_colour: str) -> np.ndarray:
    """sRGB hex to linear RGB (IEC 61966-2-1)."""
    v = np.array([int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)])
    return np.where(v <= 0.04045, v / 12.92, ((v + 0.055) / 1.055) ** 2.4)


def _lab(lin: np.ndarray) -> np.ndarray:
    """Linear sRGB to CIE 1976 L*a*b* with the D65 white (IEC 61966-2-1; CIE 15)."""
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    xyz = m @ np.clip(lin, 0, 1) / np.array([0.95047, 1.0, 1.08883])
    d = 6 / 29
    f = np.where(xyz > d ** 3, np.cbrt(xyz), xyz / (3 * d * d) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_lightness_matches_cie_worked_values():
    """L* of black, white and mid grey match the CIE 1976 formula's known values."""
    # CIE 1976 L*: black 0, white 100; sRGB 128 grey is 53.585 (computed from the
    # sRGB decoding of IEC 61966-2-1 and L* = 116 Y^(1/3) - 16).
    assert srgb_to_lightness("#000000") == pytest.approx(0.0, abs=1e-9)
    assert srgb_to_lightness("#ffffff") == pytest.approx(100.0, abs=1e-6)
    assert srgb_to_lightness("#808080") == pytest.approx(53.585, abs=0.01)
    # and it agrees with the independent Lab conversion used below
    for colour in (PALETTE.held_out, PALETTE.training, PALETTE.pick):
        assert srgb_to_lightness(colour) == pytest.approx(_lab(_linear(colour))[0], abs=0.2)


@pytest.mark.parametrize("a,b", SIDE_BY_SIDE)
def test_side_by_side_roles_differ_in_lightness(a, b):
    """Roles drawn together differ by at least 10 L* units, so greyscale keeps them apart."""
    la = srgb_to_lightness(getattr(PALETTE, a))
    lb = srgb_to_lightness(getattr(PALETTE, b))
    # 10 L* units is a clearly visible step in grey (common practice for
    # greyscale-safe palettes)
    assert abs(la - lb) >= 10, (a, la, b, lb)


@pytest.mark.parametrize("kind", sorted(MACHADO))
def test_roles_stay_apart_under_simulated_colour_blindness(kind):
    """Under each simulated deficiency every side-by-side pair keeps a CIELAB distance >= 15."""
    for a, b in SIDE_BY_SIDE:
        ca = _lab(MACHADO[kind] @ _linear(getattr(PALETTE, a)))
        cb = _lab(MACHADO[kind] @ _linear(getattr(PALETTE, b)))
        # Delta E*ab of 15 is far above the just-noticeable ~2.3 (common practice)
        assert np.linalg.norm(ca - cb) >= 15, (kind, a, b, np.linalg.norm(ca - cb))


def test_series_colours_are_not_a_red_green_pair():
    """No two series colours are a red and a green hue (the common confusion of dichromats)."""
    import colorsys

    def hue(c):
        r, g, b = (int(c[i:i + 2], 16) / 255 for i in (1, 3, 5))
        return colorsys.rgb_to_hsv(r, g, b)[0] * 360

    def red(h):
        return h < 20 or h > 340

    def green(h):
        return 90 < h < 160
    for x, y in itertools.combinations(PALETTE.series(), 2):
        hx, hy = hue(x), hue(y)
        assert not ((red(hx) and green(hy)) or (green(hx) and red(hy))), (x, y)


def test_sequential_map_darkens_monotonically():
    """The confusion-matrix map falls in lightness from low to high values (greyscale-safe)."""
    cmap = sequential_map()
    rgba = cmap(np.linspace(0, 1, 64))
    light = [srgb_to_lightness("#%02x%02x%02x" % tuple(int(round(255 * v)) for v in c[:3]))
             for c in rgba]
    assert all(b < a + 1e-6 for a, b in zip(light, light[1:]))
    assert light[0] - light[-1] > 70


def _relative_luminance(hex_colour: str) -> float:
    """WCAG 2.1 relative luminance (sRGB decoding, Rec. 709 weights)."""
    r, g, b = _linear(hex_colour)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


@pytest.mark.parametrize("role", ["ink", "muted_text", "held_out", "pick"])
@pytest.mark.parametrize("ground", ["paper", "white"])
def test_page_text_colours_meet_the_wcag_contrast_minimum(role, ground):
    """Text colours used on the page reach WCAG 2.1's 4.5:1 contrast on the page and on white."""
    fg = _relative_luminance(getattr(PALETTE, role))
    bg = _relative_luminance("#ffffff" if ground == "white" else PALETTE.paper)
    # WCAG 2.1 success criterion 1.4.3: (L1 + 0.05) / (L2 + 0.05) >= 4.5 for body text
    assert (max(fg, bg) + 0.05) / (min(fg, bg) + 0.05) >= 4.5
