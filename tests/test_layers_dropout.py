"""Tests of inverted dropout."""

from __future__ import annotations

import numpy as np
import pytest

from helpers import randn, simple_op
from tinyconv.gradients import check_layer
from tinyconv.layers import build


def _dropout(rate, seed=0, dtype=np.float64):
    return build(simple_op("dropout", (10, 10, 4), rate=rate), np.random.default_rng(seed), dtype)


def test_identity_in_evaluation():
    """Evaluation returns the input unchanged."""
    layer = _dropout(0.3)
    x = randn((2, 10, 10, 4), 1)
    np.testing.assert_array_equal(layer.forward(x, training=False), x)


@pytest.mark.parametrize("rate", [0.2, 0.5])
def test_inverted_scaling_in_training(rate):
    """Training zeroes about `rate` of the values and scales the rest by 1/(1-rate)."""
    # Inverted dropout scales kept values by 1 / (1 - rate) in training (common practice).
    layer = _dropout(rate)
    x = np.ones((50, 10, 10, 4))
    y = layer.forward(x, training=True)
    kept = y != 0
    np.testing.assert_allclose(y[kept], 1.0 / (1.0 - rate))
    # 20,000 Bernoulli draws: the kept fraction's standard error is below 0.004.
    assert abs(kept.mean() - (1.0 - rate)) < 0.02
    assert abs(y.mean() - 1.0) < 0.05  # expectation preserved (inverted dropout)
    g = randn(y.shape, 2)
    np.testing.assert_array_equal(layer.backward(g), g * y)


def test_masks_come_from_the_generator():
    """Two layers with the same seed draw the same masks; another seed draws others."""
    x = np.ones((4, 10, 10, 4))
    a, b, c = _dropout(0.5, 1), _dropout(0.5, 1), _dropout(0.5, 2)
    ya = a.forward(x, training=True)
    np.testing.assert_array_equal(ya, b.forward(x, training=True))
    assert not np.array_equal(ya, c.forward(x, training=True))
    assert not np.array_equal(ya, a.forward(x, training=True))  # a new mask each forward


def test_gradient_check_uses_a_fixed_mask():
    """The checker holds one dropout mask, passes, and says so in the note."""
    layer = _dropout(0.4)
    # Outside check: central differences (Nocedal & Wright, section 8.1 [from memory]).
    (row,) = check_layer(layer, randn((2, 10, 10, 4), 3), max_coords=200)
    assert row.passed and row.max_rel_error < 1e-6, row
    assert "fixed dropout mask" in row.note
    assert layer.hold_mask is False  # the caller's layer is untouched


def test_float32_mask():
    """A float32 input gives a float32 output."""
    layer = _dropout(0.5, dtype=np.float32)
    assert layer.forward(np.ones((2, 10, 10, 4), np.float32), training=True).dtype == np.float32


def test_bad_rate_is_refused():
    """A rate outside [0, 1) fails with the rule in the message."""
    with pytest.raises(ValueError, match=r"dropout rate must be in \[0, 1\), got 1.0"):
        _dropout(1.0)
