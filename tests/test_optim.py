"""Optimiser steps against the published update rules, and the schedules."""

import math

import numpy as np
import pytest

from tinyconv.errors import InputError
from tinyconv.optim import SGD, Adam, learning_rate


def _params(seed):
    rng = np.random.default_rng(seed)
    return [("1:c4k3/w", rng.normal(size=(3, 3, 1, 4))), ("1:c4k3/b", rng.normal(size=4))]


def test_adam_first_step_is_the_worked_value():
    """With the default settings and g = 0.5 the first Adam step moves theta by -9.9999998e-4."""
    theta = np.array([1.0])
    opt = Adam([("0:x/w", theta)])
    opt.update([np.array([0.5])], lr=1e-3)
    # Kingma & Ba, ICLR 2015, defaults alpha=1e-3, beta1=0.9, beta2=0.999, eps=1e-8;
    # 1e-3 * 0.5 / (0.5 + 1e-8) = 9.9999998e-4 (computed)
    assert theta[0] - 1.0 == pytest.approx(-9.9999998e-4, abs=1e-12)


def test_adam_matches_the_paper_algorithm_over_several_steps():
    """Five Adam steps equal Algorithm 1 of Kingma & Ba (ICLR 2015) written out by hand."""
    params = _params(0)
    start = [p.copy() for _, p in params]
    opt = Adam(params, beta1=0.8, beta2=0.99, eps=1e-6)
    rng = np.random.default_rng(1)
    grads = [[rng.normal(size=p.shape) for p in start] for _ in range(5)]
    for g in grads:
        opt.update(g, lr=0.01)
    for j, theta in enumerate(start):
        theta = theta.copy()
        m = np.zeros_like(theta)
        v = np.zeros_like(theta)
        for t, g in enumerate(grads, 1):
            m = 0.8 * m + 0.2 * g[j]
            v = 0.99 * v + 0.01 * g[j] ** 2
            m_hat = m / (1 - 0.8 ** t)
            v_hat = v / (1 - 0.99 ** t)
            theta = theta - 0.01 * m_hat / (np.sqrt(v_hat) + 1e-6)
        np.testing.assert_allclose(params[j][1], theta, rtol=1e-12, atol=1e-14)


def test_sgd_momentum_matches_the_heavy_ball_rule():
    """SGD steps equal v = mu v + g; theta -= lr v written out by hand (Polyak 1964)."""
    params = _params(2)
    theta = [p.copy() for _, p in params]
    vel = [np.zeros_like(p) for p in theta]
    opt = SGD(params, momentum=0.9)
    rng = np.random.default_rng(3)
    for step in range(4):
        g = [rng.normal(size=p.shape) for p in theta]
        lr = 0.1 / (step + 1)
        opt.update(g, lr)
        for j in range(2):
            vel[j] = 0.9 * vel[j] + g[j]
            theta[j] = theta[j] - lr * vel[j]
    for (_, p), want in zip(params, theta):
        np.testing.assert_allclose(p, want, rtol=1e-13)


def test_decoupled_decay_shrinks_weights_only():
    """Decoupled decay with a zero gradient scales weights by (1 - lr wd), biases untouched."""
    params = _params(4)
    w0, b0 = params[0][1].copy(), params[1][1].copy()
    opt = Adam(params, weight_decay=0.5, decay="decoupled")
    opt.update([np.zeros_like(w0), np.zeros_like(b0)], lr=0.1)
    # Loshchilov & Hutter, ICLR 2019: theta <- theta - lr * wd * theta
    np.testing.assert_allclose(params[0][1], w0 * (1 - 0.1 * 0.5), rtol=1e-14)
    np.testing.assert_array_equal(params[1][1], b0)


def test_l2_decay_adds_the_penalty_gradient():
    """L2 decay equals passing g + wd * w to the undecayed optimiser (gradient of wd/2 ||w||^2)."""
    a, b = _params(5), _params(5)
    g = [np.full_like(p, 0.3) for _, p in a]
    Adam(a, weight_decay=0.01, decay="l2").update(g, lr=0.01)
    Adam(b).update([g[0] + 0.01 * b[0][1], g[1]], lr=0.01)
    for (_, p), (_, q) in zip(a, b):
        np.testing.assert_array_equal(p, q)


def test_plain_sgd_decoupled_and_l2_agree():
    """Without momentum decoupled decay and L2 decay give the same step (both lr * wd * w)."""
    a, b = _params(6), _params(6)
    g = [np.full_like(p, -0.2) for _, p in a]
    SGD(a, momentum=0.0, weight_decay=0.1, decay="decoupled").update(g, lr=0.5)
    SGD(b, momentum=0.0, weight_decay=0.1, decay="l2").update(g, lr=0.5)
    for (_, p), (_, q) in zip(a, b):
        np.testing.assert_allclose(p, q, rtol=1e-14)


def test_updates_are_in_place_and_keep_float32():
    """The optimiser changes the very arrays it was given and keeps their dtype."""
    w = np.ones((2, 2), dtype=np.float32)
    opt = SGD([("0:x/w", w)], momentum=0.5)
    opt.update([np.ones((2, 2), dtype=np.float32)], lr=0.25)
    assert w.dtype == np.float32
    np.testing.assert_array_equal(w, np.full((2, 2), 0.75, dtype=np.float32))


def test_constant_and_step_schedules():
    """Constant stays at base; step drops tenfold at 50 % and 75 % of the epochs."""
    assert [learning_rate(0.1, e, 8, "constant") for e in range(8)] == [0.1] * 8
    got = [learning_rate(1.0, e, 8, "step") for e in range(8)]
    assert got == pytest.approx([1, 1, 1, 1, 0.1, 0.1, 0.01, 0.01])


def test_cosine_schedule_follows_the_half_cosine():
    """Cosine equals base * (1 + cos(pi e / E)) / 2 (Loshchilov & Hutter, ICLR 2017)."""
    got = [learning_rate(0.2, e, 10, "cosine") for e in range(10)]
    want = [0.2 * 0.5 * (1 + math.cos(math.pi * e / 10)) for e in range(10)]
    assert got == pytest.approx(want, rel=1e-15)
    assert got[0] == 0.2 and got[5] == pytest.approx(0.1)
    assert all(a > b for a, b in zip(got, got[1:])) and got[-1] > 0


def test_bad_settings_are_refused():
    """Unknown schedule, decay kind and a bad momentum are refused with the allowed values."""
    with pytest.raises(InputError, match=r"schedule 'linear' is unknown; expected one of "
                                         r"constant, step, cosine"):
        learning_rate(0.1, 0, 5, "linear")
    with pytest.raises(InputError, match=r"decay kind 'weight' is unknown; expected one of "
                                         r"decoupled, l2"):
        Adam(_params(7), decay="weight")
    with pytest.raises(InputError, match=r"momentum must be in \[0, 1\), got 1\.0"):
        SGD(_params(7), momentum=1.0)
