"""Weight rounding with error feedback against nearest rounding and brute force."""

import itertools

import numpy as np
import pytest

from tinyconv.quant.rounding import MIN_SAMPLES_PER_INPUT, feedback_round, nearest, round_weights


def correlated_inputs(n: int, m: int, seed: int) -> np.ndarray:
    """Inputs sharing a strong common component, as neighbouring pixels do."""
    rng = np.random.default_rng(seed)
    return rng.normal(size=(n, 1)) * 3.0 + rng.normal(size=(n, m)) * 0.3


def output_error(x: np.ndarray, w: np.ndarray, scale: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Mean squared output error per channel, E[(x (w - s q))^2]."""
    return np.mean((x @ (w - q * scale)) ** 2, axis=0)


def test_feedback_between_brute_force_and_nearest():
    """Output error: exhaustive optimum <= error feedback <= nearest rounding (m = 4)."""
    rng = np.random.default_rng(0)
    x = correlated_inputs(2000, 4, seed=1)
    h = x.T @ x / len(x)
    worse = 0
    for trial in range(30):
        w = rng.normal(size=(4, 1)) * 0.2
        scale = np.abs(w).max(axis=0) / 127 * 40  # coarse steps make the choice matter
        q_near = np.round(w / scale)
        q_fb = feedback_round(w, scale, h).astype(float)
        # brute force over every q within one step of nearest: an obviously right reference
        best = min(output_error(x, w, scale, q_near + np.array(d, float)[:, None])[0]
                   for d in itertools.product((-1, 0, 1), repeat=4))
        e_fb = output_error(x, w, scale, q_fb)[0]
        assert best <= e_fb + 1e-12
        worse += e_fb > output_error(x, w, scale, q_near)[0] + 1e-12
    assert worse <= 2  # greedy, so not always optimal, but better than nearest nearly always


def test_feedback_reduces_layer_output_error():
    """Summed over 16 channels of 27 inputs, feedback halves the output error or better."""
    rng = np.random.default_rng(2)
    x = correlated_inputs(5000, 27, seed=3)
    w = rng.normal(size=(27, 16)) * 0.1
    scale = np.abs(w).max(axis=0) / 127
    h = x.T @ x / len(x)
    e_near = output_error(x, w, scale, nearest(w, scale).astype(float)).sum()
    e_fb = output_error(x, w, scale, feedback_round(w, scale, h).astype(float)).sum()
    assert e_fb < 0.5 * e_near


def test_feedback_stays_in_range():
    """Compensation never pushes an integer outside [-127, 127]."""
    rng = np.random.default_rng(4)
    x = correlated_inputs(500, 9, seed=5)
    w = rng.normal(size=(9, 4))
    w[0] = np.abs(w).max(axis=0)  # the largest weights first: later ones get pushed
    scale = np.abs(w).max(axis=0) / 127
    q = feedback_round(w, scale, x.T @ x / len(x))
    assert q.dtype == np.int8 and np.abs(q.astype(int)).max() <= 127


def test_round_weights_falls_back_to_nearest():
    """Too few samples, no moments or method 'nearest' give plain rounding."""
    rng = np.random.default_rng(6)
    w = rng.normal(size=(3, 3, 2, 4))
    scale = np.abs(w).max(axis=(0, 1, 2)) / 127
    x = correlated_inputs(1000, 18, seed=7)
    h = x.T @ x / len(x)
    want = np.clip(np.round(w / scale), -127, 127)
    few = MIN_SAMPLES_PER_INPUT * 18 - 1
    for args in ((h, few, "feedback"), (None, 1000, "feedback"), (h, 1000, "nearest")):
        np.testing.assert_array_equal(round_weights("conv", w, scale, *args), want)
    assert not np.array_equal(round_weights("conv", w, scale, h, 1000, "feedback"), want)
    with pytest.raises(ValueError, match="rounding method 'exact'"):
        round_weights("conv", w, scale, h, 1000, "exact")


def test_depthwise_uses_each_channel_moment():
    """A depthwise channel is rounded with its own input moment."""
    rng = np.random.default_rng(8)
    w = rng.normal(size=(3, 3, 2)) * 0.1
    scale = np.abs(w).max(axis=(0, 1)) / 127
    xs = [correlated_inputs(800, 9, seed=s) for s in (9, 10)]
    h = np.stack([x.T @ x / len(x) for x in xs])
    q = round_weights("dwconv", w, scale, h, 800, "feedback")
    for ch in range(2):
        alone = feedback_round(w[:, :, ch].reshape(9, 1), scale[ch:ch + 1], h[ch])
        np.testing.assert_array_equal(q[:, :, ch].reshape(9, 1), alone)


def test_degenerate_moments_fall_back_to_nearest():
    """All-zero or non-finite input moments (a dead input) give plain rounding."""
    rng = np.random.default_rng(11)
    w = rng.normal(size=(9, 3))
    scale = np.abs(w).max(axis=0) / 127
    for h in (np.zeros((9, 9)), np.full((9, 9), np.nan)):
        np.testing.assert_array_equal(feedback_round(w, scale, h), nearest(w, scale))
