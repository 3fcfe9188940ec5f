"""The demo data set: glazed workshop tiles sorted by the maker's mark.

A ceramics workshop stamps one of eight marks on each tile: ring, cross, bar,
chevron, dot pair, triangle, square, star. :func:`make_tiles` draws such tiles
as a camera over the conveyor would see them:

* the mark, anti-aliased, anywhere in a band around the centre, tilted by up
  to :data:`MAX_TURN` (the conveyor's guides keep the tiles square, the stamp
  is set by hand), at a random scale and stroke width; it is drawn from the
  distance to its strokes with one pixel of coverage ramp,
  ``coverage = clip(0.5 - distance_px, 0, 1)`` (anti-aliasing);
* on one of the workshop's :data:`GLAZES`, each fired a little differently,
  the mark darker than the glaze (glaze pools in the stamped hollow);
* a lighting gradient in a random direction, glaze speckle, lens blur of
  random strength and sensor noise.

Every image of a batch is computed at once over the pixel grid (NumPy, no
per-pixel loops), deterministically from the seed. Because the mark moves
by about a third of the tile, a classifier that weighs fixed pixels (a
dense network) does poorly, while a small convolutional one, which finds the
same stroke pattern anywhere, does well; the tests train both briefly.
"""

from __future__ import annotations

import numpy as np

from tinyconv.errors import DataError

from .dataset import Dataset

CLASSES = ("ring", "cross", "bar", "chevron", "dot-pair", "triangle", "square", "star")
SPEC = "builtin:tiles"
MAX_TURN = np.deg2rad(25.0)  # the conveyor's guides keep tiles square; the stamp is tilted by hand
_CHUNK = 512  # images computed together (bounds memory; results do not depend on it)


def _polygon(radii: np.ndarray, start_deg: float) -> np.ndarray:
    """Closed polygon as segments (m, 4) with vertices at the given radii."""
    m = radii.size
    ang = np.deg2rad(start_deg + 360.0 * np.arange(m) / m)
    pts = np.stack([radii * np.cos(ang), radii * np.sin(ang)], axis=1)
    return np.concatenate([pts, np.roll(pts, -1, axis=0)], axis=1)


# stroke segments (x0, y0, x1, y1) of each mark in its own frame, radius about 1
_SEGMENTS: dict[str, np.ndarray] = {
    "cross": np.array([[-1.0, 0.0, 1.0, 0.0], [0.0, -1.0, 0.0, 1.0]]),
    "bar": np.array([[-1.0, 0.0, 1.0, 0.0]]),
    "chevron": np.array([[-0.75, 0.55, 0.0, -0.55], [0.0, -0.55, 0.75, 0.55]]),
    "triangle": _polygon(np.ones(3), 90.0),
    "square": _polygon(np.full(4, 0.95), 45.0),
    "star": _polygon(np.tile([1.0, 0.45], 5), 90.0),
}
_RING_RADIUS = 0.75
# glaze colours as (hue, saturation, value): celadon, cobalt, ochre, oxblood, cream,
# tenmoku, turquoise, slate
GLAZES = ((0.36, 0.30, 0.75), (0.62, 0.75, 0.65), (0.11, 0.70, 0.80), (0.99, 0.75, 0.55),
          (0.13, 0.18, 0.93), (0.07, 0.65, 0.45), (0.49, 0.55, 0.75), (0.58, 0.15, 0.55))
_DOT_CENTRES = np.array([[-0.5, 0.0], [0.5, 0.0]])
_DOT_RADIUS = 0.26


def _segment_distance(qx: np.ndarray, qy: np.ndarray, seg: np.ndarray) -> np.ndarray:
    """Distance from points (any shape) to the nearest of segments (m, 4)."""
    best = np.full(qx.shape, np.inf, dtype=qx.dtype)
    for x0, y0, x1, y1 in seg:
        dx, dy = x1 - x0, y1 - y0
        t = np.clip(((qx - x0) * dx + (qy - y0) * dy) / (dx * dx + dy * dy), 0.0, 1.0)
        ex, ey = qx - x0 - t * dx, qy - y0 - t * dy
        np.minimum(best, ex * ex + ey * ey, out=best)   # squared, root taken once
    return np.sqrt(best)


def mark_distance(name: str, qx: np.ndarray, qy: np.ndarray) -> tuple[np.ndarray, bool]:
    """Distance (mark units) to a mark's strokes, and whether it is filled.

    For stroked marks the distance is to the centre line (the stroke width is
    subtracted by the caller); for the filled dot pair it is signed, negative
    inside the dots.
    """
    if name == "ring":
        return np.abs(np.sqrt(qx * qx + qy * qy) - _RING_RADIUS), False
    if name == "dot-pair":
        ax, bx = qx - _DOT_CENTRES[0, 0], qx - _DOT_CENTRES[1, 0]
        ay, by = qy - _DOT_CENTRES[0, 1], qy - _DOT_CENTRES[1, 1]
        d = np.sqrt(np.minimum(ax * ax + ay * ay, bx * bx + by * by))
        return d - _DOT_RADIUS, True
    return _segment_distance(qx, qy, _SEGMENTS[name]), False


def _hsv_to_rgb(h: np.ndarray, s: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Vectorised HSV -> RGB for arrays of shape (n,); returns (n, 3)."""
    i = np.floor(h * 6.0).astype(np.int64) % 6
    f = h * 6.0 - np.floor(h * 6.0)
    p, q, t = v * (1 - s), v * (1 - s * f), v * (1 - s * (1 - f))
    table = np.stack([np.stack([v, t, p], 1), np.stack([q, v, p], 1),
                      np.stack([p, v, t], 1), np.stack([p, q, v], 1),
                      np.stack([t, p, v], 1), np.stack([v, p, q], 1)], 0)  # (6, n, 3)
    return table[i, np.arange(h.size)]


def _draw_params(rng: np.random.Generator, n: int, size: int) -> dict[str, np.ndarray]:
    """Every per-image random choice, drawn up front (shapes (n,) or (n, 3))."""
    half = size / 2.0
    # the workshop's glazes, each fired a little differently
    pick = rng.integers(0, len(GLAZES), n)
    hsv = np.array(GLAZES)[pick] + rng.uniform(-1.0, 1.0, (n, 3)) * [0.03, 0.12, 0.12]
    glaze = _hsv_to_rgb(hsv[:, 0] % 1.0, np.clip(hsv[:, 1], 0.0, 1.0),
                        np.clip(hsv[:, 2], 0.35, 1.0))
    # the stamp leaves a hollow where the glaze pools: the mark is darker
    mark = glaze * rng.uniform(0.2, 0.55, (n, 1))
    return {
        "cx": rng.uniform(-0.35, 0.35, n) * half,        # mark centre, pixels from middle
        "cy": rng.uniform(-0.35, 0.35, n) * half,
        "angle": rng.uniform(-1.0, 1.0, n) * MAX_TURN,   # radians; stamped by hand
        "radius": rng.uniform(0.35, 0.6, n) * half,      # mark radius, pixels
        "stroke": rng.uniform(0.7, 1.4, n) * (size / 32.0),  # half stroke width, pixels
        "glaze": glaze,
        "mark": mark,
        "light_gain": rng.uniform(0.0, 0.3, n),
        "light_angle": rng.uniform(0.0, 2.0 * np.pi, n),
        "speckle": rng.uniform(0.005, 0.03, n),
        "blur": rng.uniform(0.0, 1.0, n),
        "noise": rng.uniform(0.005, 0.025, n),
    }


def _blur(x: np.ndarray) -> np.ndarray:
    """Separable [1, 2, 1] / 4 blur of (n, h, w) fields, edge pixels repeated."""
    out = 0.5 * x
    out[:, 1:] += 0.25 * x[:, :-1]            # neighbour above
    out[:, :-1] += 0.25 * x[:, 1:]            # neighbour below
    out[:, 0] += 0.25 * x[:, 0]               # edges repeat themselves
    out[:, -1] += 0.25 * x[:, -1]
    x = out
    out = 0.5 * x
    out[:, :, 1:] += 0.25 * x[:, :, :-1]
    out[:, :, :-1] += 0.25 * x[:, :, 1:]
    out[:, :, 0] += 0.25 * x[:, :, 0]
    out[:, :, -1] += 0.25 * x[:, :, -1]
    return out


def _render(labels: np.ndarray, prm: dict[str, np.ndarray], size: int,
            rng: np.random.Generator) -> np.ndarray:
    """Images of one chunk whose labels are sorted, shape (n, size, size, 3), uint8.

    The mark coverage and the speckle are single-channel fields; blur is applied
    to them (the lighting is smooth and the glaze flat, so blurring before
    colouring matches blurring the colour image up to the gradient's slope).
    """
    f32 = np.float32
    n = labels.size
    p = {k: v.astype(f32) for k, v in prm.items()}
    coords = (np.arange(size) + 0.5 - size / 2.0).astype(f32)  # pixel centres from the middle
    px = coords[None, None, :]                          # (1, 1, w)
    py = coords[None, :, None]                          # (1, h, 1)
    # into each mark's frame: rotate by -angle about its centre, divide by radius
    cos = np.cos(p["angle"])[:, None, None]
    sin = np.sin(p["angle"])[:, None, None]
    dx = px - p["cx"][:, None, None]
    dy = py - p["cy"][:, None, None]
    r = p["radius"][:, None, None]
    qx = (cos * dx + sin * dy) / r                      # (n, h, w)
    qy = (-sin * dx + cos * dy) / r
    cover = np.empty((n, size, size), dtype=f32)
    bounds = np.searchsorted(labels, np.arange(len(CLASSES) + 1))
    for c, name in enumerate(CLASSES):
        sl = slice(bounds[c], bounds[c + 1])          # labels sorted: one view per mark
        if sl.start == sl.stop:
            continue
        d, filled = mark_distance(name, qx[sl], qy[sl])
        stroke = p["stroke"][sl][:, None, None]
        dist_px = d * r[sl] - (0.5 * stroke if filled else stroke)
        np.clip(0.5 - dist_px, 0.0, 1.0, out=cover[sl])  # anti-aliased coverage
    # glaze speckle: sparse flecks; u < rate marks a fleck and u / rate sets its shade
    u = rng.random((n, size, size), dtype=f32)
    rate = p["speckle"][:, None, None]
    fleck = np.where(u < rate, u / rate * f32(0.7) - f32(0.4), f32(0.0))
    b = p["blur"][:, None, None]
    cover += b * (_blur(cover) - cover)
    fleck += b * (_blur(fleck) - fleck)
    # lighting gradient across the tile
    la = p["light_angle"][:, None, None]
    light = f32(1.0) + p["light_gain"][:, None, None] * (np.cos(la) * px + np.sin(la) * py) \
        * f32(2.0 / size)
    light *= f32(255.0)                               # work on the 0..255 scale from here
    out = np.empty((n, size, size, 3), dtype=np.uint8)
    # sensor noise: triangular, (u1 - u2) * sqrt(6) has unit variance (cheaper than normal)
    sigma = (p["noise"] * f32(255.0 * np.sqrt(6.0)))[:, None, None]
    for ch in range(3):                                   # one colour plane at a time
        plane = (p["mark"][:, ch] - p["glaze"][:, ch])[:, None, None] * cover
        plane += fleck
        plane += p["glaze"][:, ch][:, None, None]
        plane *= light
        noise = rng.random((n, size, size), dtype=f32)
        noise -= rng.random((n, size, size), dtype=f32)
        noise *= sigma
        plane += noise
        plane += f32(0.5)                                 # round half up on the cast below
        np.clip(plane, 0.0, 255.0, out=plane)
        out[..., ch] = plane
    return out


def make_tiles(n_per_class: int, size: int = 32, seed: int = 0) -> Dataset:
    """The workshop tiles: ``n_per_class`` images of each of the eight marks.

    Parameters
    ----------
    n_per_class : int
        Images of each mark (at least 1).
    size : int
        Side of the square images in pixels (8 to 512).
    seed : int
        The same seed gives the same images, bit for bit.

    Returns
    -------
    Dataset
        ``images`` (8 n_per_class, size, size, 3) uint8, labels in shuffled
        order, ``classes`` = :data:`CLASSES`, ``source`` the full spec.
    """
    for name, value, lo, hi in (("n_per_class", n_per_class, 1, 1_000_000),
                                ("size", size, 8, 512), ("seed", seed, 0, 2**63 - 1)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
            raise TypeError(f"{name} must be an int, got {type(value).__name__}")
        if not lo <= value <= hi:
            raise DataError(f"tiles: {name} must be between {lo} and {hi}, got {value}")
    n_per_class, size, seed = int(n_per_class), int(size), int(seed)
    seq = np.random.SeedSequence(seed)
    param_seq, pixel_seq = seq.spawn(2)
    prng = np.random.default_rng(param_seq)
    n = n_per_class * len(CLASSES)
    labels = prng.permutation(np.repeat(np.arange(len(CLASSES), dtype=np.int64), n_per_class))
    prm = _draw_params(prng, n, size)
    images = np.empty((n, size, size, 3), dtype=np.uint8)
    for start, chunk_seq in zip(range(0, n, _CHUNK), pixel_seq.spawn(-(-n // _CHUNK))):
        sl = slice(start, min(start + _CHUNK, n))
        part = {k: v[sl] for k, v in prm.items()}
        order = np.argsort(labels[sl], kind="stable")  # render grouped by mark
        part = {k: v[order] for k, v in part.items()}
        chunk = images[sl]
        chunk[order] = _render(labels[sl][order], part, size, np.random.default_rng(chunk_seq))
    source = f"{SPEC}?n={n_per_class}&size={size}&seed={seed}"
    return Dataset(images, labels, CLASSES, None, source, (), ())
