"""Augmentation transforms: each against a slow loop reference, label geometry, the text form."""

from __future__ import annotations

import numpy as np
import pytest

from tinyconv.augment import (Augment, AugmentError, Bright, Contrast, Cutout, Mirror, Shift,
                              Turn, Upend, parse_augment)


def _batch(n: int = 6, h: int = 7, w: int = 7, c: int = 2, seed: int = 0) -> np.ndarray:
    """Seeded float32 images with distinct values (no symmetry hides a wrong index)."""
    return np.random.default_rng(seed).standard_normal((n, h, w, c)).astype(np.float32)


# ------------------------------------------------------------ slow references


def ref_turn(x: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Quarter turns pixel by pixel: one counter-clockwise turn of a square takes the
    pixel at (y, x) to (s - 1 - x, y) (the rotation np.rot90 documents)."""
    n, s, _, c = x.shape
    out = x.copy()
    for i in range(n):
        img = x[i]
        for _ in range(int(k[i])):
            turned = np.empty_like(img)
            for y in range(s):
                for xx in range(s):
                    turned[s - 1 - xx, y] = img[y, xx]
            img = turned
        out[i] = img
    return out


def ref_flip(x: np.ndarray, flip: np.ndarray, axis: int) -> np.ndarray:
    """Flips pixel by pixel: row y goes to h - 1 - y (axis 1) or column x to w - 1 - x."""
    n, h, w, _ = x.shape
    out = x.copy()
    for i in range(n):
        if flip[i]:
            for y in range(h):
                for xx in range(w):
                    src = (h - 1 - y, xx) if axis == 1 else (y, w - 1 - xx)
                    out[i, y, xx] = x[i, src[0], src[1]]
    return out


def ref_shift(x: np.ndarray, moves: np.ndarray) -> np.ndarray:
    """Translation pixel by pixel: the pixel at (y, x) lands at (y + dy, x + dx) if inside;
    uncovered pixels are 0."""
    n, h, w, _ = x.shape
    out = np.zeros_like(x)
    for i in range(n):
        dy, dx = int(moves[i, 0]), int(moves[i, 1])
        for y in range(h):
            for xx in range(w):
                if 0 <= y + dy < h and 0 <= xx + dx < w:
                    out[i, y + dy, xx + dx] = x[i, y, xx]
    return out


def ref_contrast(x: np.ndarray, factor: np.ndarray) -> np.ndarray:
    """Contrast per image and channel in float64: mean + factor * (pixel - mean)."""
    n, h, w, c = x.shape
    out = np.empty_like(x)
    for i in range(n):
        for ch in range(c):
            plane = x[i, :, :, ch].astype(np.float64)
            mean = plane.sum() / (h * w)
            out[i, :, :, ch] = mean + factor[i] * (plane - mean)
    return out


def ref_bright(x: np.ndarray, offset: np.ndarray) -> np.ndarray:
    """Brightness: one offset added to every value of an image."""
    out = x.copy()
    for i in range(x.shape[0]):
        out[i] = x[i] + np.float32(offset[i])
    return out


def ref_cutout(x: np.ndarray, centres: np.ndarray, side: int) -> np.ndarray:
    """Cutout pixel by pixel: zero where top <= y < top + side and left <= x < left + side."""
    n, h, w, _ = x.shape
    out = x.copy()
    for i in range(n):
        top, left = centres[i, 0] - side // 2, centres[i, 1] - side // 2
        for y in range(h):
            for xx in range(w):
                if top <= y < top + side and left <= xx < left + side:
                    out[i, y, xx] = 0.0
    return out


CASES = [
    (Turn(), lambda x, p: ref_turn(x, p)),
    (Mirror(), lambda x, p: ref_flip(x, p, 2)),
    (Upend(), lambda x, p: ref_flip(x, p, 1)),
    (Shift(1), ref_shift),
    (Shift(3), ref_shift),
    (Contrast(40), ref_contrast),
    (Bright(25), ref_bright),
    (Cutout(3), lambda x, p: ref_cutout(x, p, 3)),
    (Cutout(4), lambda x, p: ref_cutout(x, p, 4)),
]


@pytest.mark.parametrize("step, reference", CASES, ids=[str(s) for s, _ in CASES])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_transform_matches_slow_reference(step, reference, seed):
    """Each transform's vectorised apply equals its loop reference on seeded batches."""
    shape = (9, 6, 6, 3) if isinstance(step, Turn) else (9, 5, 7, 3)
    x = _batch(*shape, seed=seed)
    before = x.copy()
    rng = np.random.default_rng(seed)
    params = step.draw(rng, shape[0], shape[1], shape[2])
    got = step.apply(x, params)
    np.testing.assert_array_equal(x, before)            # the input is never changed
    assert got.dtype == x.dtype and got.shape == x.shape
    np.testing.assert_allclose(got, reference(x, params), rtol=1e-6, atol=1e-6)


def test_draws_cover_their_ranges():
    """Draws stay inside their documented ranges and reach both ends."""
    rng = np.random.default_rng(3)
    k = Turn().draw(rng, 400, 8, 8)
    assert set(k.tolist()) == {0, 1, 2, 3}
    moves = Shift(2).draw(rng, 400, 8, 8)
    assert moves.min() == -2 and moves.max() == 2
    factor = Contrast(30).draw(rng, 400, 8, 8)
    assert 0.7 <= factor.min() < 0.72 and 1.28 < factor.max() <= 1.3
    centres = Cutout(3).draw(rng, 400, 5, 9)
    assert centres[:, 0].max() == 4 and centres[:, 1].max() == 8 and centres.min() == 0
    flips = Mirror().draw(rng, 4000, 8, 8)
    assert 0.45 < flips.mean() < 0.55


def test_flip_of_a_flip_is_identity():
    """Mirroring or upending a batch twice with the same draws gives it back exactly."""
    x = _batch(8, 5, 6, 2, seed=4)
    for step in (Mirror(), Upend()):
        flip = np.ones(8, dtype=bool)
        np.testing.assert_array_equal(step.apply(step.apply(x, flip), flip), x)
        once = step.apply(x, flip)
        assert not np.array_equal(once, x)


def test_four_quarter_turns_are_identity():
    """Four single quarter turns give each image back; two equal a mirror then an upend."""
    x = _batch(5, 6, 6, 2, seed=5)
    one = np.ones(5, dtype=np.int64)
    y = x
    for _ in range(4):
        y = Turn().apply(y, one)
    np.testing.assert_array_equal(y, x)
    both = np.ones(5, dtype=bool)
    # A half turn is the composition of the two flips (plane geometry).
    np.testing.assert_array_equal(Turn().apply(x, 2 * one),
                                  Upend().apply(Mirror().apply(x, both), both))


def test_shift_by_zero_and_cutout_outside_leave_images_alone():
    """A zero move changes nothing; a square of side 1 hides exactly one pixel per image."""
    x = _batch(4, 5, 5, 1, seed=6)
    np.testing.assert_array_equal(Shift(2).apply(x, np.zeros((4, 2), np.int64)), x)
    cut = Cutout(1).apply(x, np.array([[0, 0], [4, 4], [2, 3], [1, 0]]))
    assert ((cut != x).sum(axis=(1, 2, 3)) == 1).all()


def test_augment_runs_steps_in_canonical_order_from_one_generator():
    """An Augment draws each step in order from one generator; the same seed repeats it."""
    x = _batch(6, 6, 6, 1, seed=7)
    aug = parse_augment("cutout2+shift1+mirror+turn")
    assert str(aug) == "turn+mirror+shift1+cutout2"
    a = aug(x, np.random.default_rng(11))
    b = aug(x, np.random.default_rng(11))
    np.testing.assert_array_equal(a, b)
    rng = np.random.default_rng(11)
    y = x
    for step in aug.steps:
        y = step.apply(y, step.draw(rng, 6, 6, 6))
    np.testing.assert_array_equal(a, y)


def test_text_form_round_trips_and_is_canonical():
    """Texts give canonical forms that parse back to themselves; none is empty."""
    assert str(parse_augment("none")) == "none" and not parse_augment(" None ")
    for text in ("shift2+mirror+upend+turn", "bright20+contrast30", "cutout8", "upend+turn"):
        canon = str(parse_augment(text))
        assert str(parse_augment(canon)) == canon
        assert parse_augment(canon) == parse_augment(text)
    assert parse_augment("mirror+shift2") == parse_augment("shift2+mirror")
    assert parse_augment("turn").steps == (Turn(),)
    assert Augment() == parse_augment("none")


@pytest.mark.parametrize("text, message", [
    ("twist", r"'twist' is not a transform; known: turn, .*'none'"),
    ("shift", r"shift needs a whole number from 1 to 16 after it, got 'shift'; e.g. shift2"),
    ("shift40", r"shift needs a whole number from 1 to 16"),
    ("mirror2", r"mirror takes no number, got 'mirror2'; write mirror"),
    ("turn+turn", r"turn is given twice; give each transform once"),
    ("shift2+", r"'' is not a transform"),
    (3, r"augment must be a text"),
])
def test_bad_texts_are_refused(text, message):
    """Unknown words, bad numbers and repeats are refused naming the token and the fix."""
    with pytest.raises(AugmentError, match=message):
        parse_augment(text)


def test_turn_refuses_non_square_images():
    """Quarter turns of 6x8 images are refused with the size and what to do."""
    with pytest.raises(AugmentError, match=r"turn needs square images, and these are 6x8; "
                                           r"take turn out"):
        parse_augment("turn+mirror").check_shape(6, 8)
    parse_augment("mirror+shift1").check_shape(6, 8)
