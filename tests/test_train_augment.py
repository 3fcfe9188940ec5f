"""Augmentation in the training loop: which batches it changes, its seeding, its refusals."""

from __future__ import annotations

import numpy as np
import pytest

from tinyconv.augment import parse_augment
from tinyconv.errors import InputError
from tinyconv.network import Network
from tinyconv.train import AUGMENT_STREAM, TrainConfig, evaluate, fit


def _data(n: int, seed: int, size: int = 8) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    return (rng.standard_normal((n, size, size, 1)).astype(np.float32),
            rng.integers(0, 3, size=n))


class Recorder:
    """Wraps a network's forward and keeps a copy of every input, by mode."""

    def __init__(self, net: Network):
        self.net, self.seen = net, {True: [], False: []}
        self._forward = net.forward
        net.forward = self.forward

    def forward(self, x, training=False):
        self.seen[bool(training)].append(np.array(x, copy=True))
        return self._forward(x, training=training)


def test_only_training_batches_are_augmented_with_the_documented_draws():
    """Training batches are augment(x[idx]) drawn from [seed, AUGMENT_STREAM]; held-out
    images reach the network unchanged, and neither array is altered."""
    x, y = _data(20, 0)
    xv, yv = _data(9, 1)
    x0, xv0 = x.copy(), xv.copy()
    config = TrainConfig(epochs=2, batch_size=8, lr=0.01, seed=5,
                         augment="shift1+mirror+turn+cutout2")
    net = Network.from_arch("8x8gray/c2k3-p2", 3, seed=0)
    rec = Recorder(net)
    fit(net, x, y, config, xv, yv)
    np.testing.assert_array_equal(x, x0)
    np.testing.assert_array_equal(xv, xv0)
    # The same draws, made here: batch order from the seed, augmentation from its stream.
    order = np.random.default_rng(5)
    draws = np.random.default_rng([5, AUGMENT_STREAM])
    aug = parse_augment(config.augment)
    expected = []
    for _ in range(2):
        for idx in np.array_split(order.permutation(20), 3):
            expected.append(aug(x[idx], draws))
    assert len(rec.seen[True]) == len(expected)
    for got, want in zip(rec.seen[True], expected):
        np.testing.assert_array_equal(got, want)
    assert any(not np.array_equal(got, x[idx]) for got, idx in
               zip(rec.seen[True], np.array_split(np.random.default_rng(5).permutation(20), 3)))
    # every evaluation pass saw the held-out images exactly
    assert rec.seen[False] and all(np.array_equal(v, xv) for v in rec.seen[False])


def test_held_out_figures_are_those_of_plain_evaluation():
    """The last epoch's held-out loss equals evaluate() on the untouched images."""
    x, y = _data(24, 2)
    xv, yv = _data(12, 3)
    net = Network.from_arch("8x8gray/c2k3-p2", 3, seed=1)
    hist = fit(net, x, y, TrainConfig(epochs=3, batch_size=8, lr=0.01,
                                      augment="bright30+contrast20"), xv, yv)
    assert evaluate(net, xv, yv)[0] == pytest.approx(hist.held_loss[-1])


def test_augmented_training_is_reproducible_and_differs_from_plain():
    """One seed gives bit-identical weights with augmentation; without it they differ."""
    x, y = _data(24, 4)

    def weights(augment: str) -> list[np.ndarray]:
        net = Network.from_arch("8x8gray/c2k3-p2", 3, seed=2)
        fit(net, x, y, TrainConfig(epochs=2, batch_size=8, lr=0.01, seed=3, augment=augment))
        return [a.copy() for _, a in net.param_list()]

    a, b, plain = weights("shift1+upend"), weights("upend+shift1"), weights("none")
    assert all(np.array_equal(p, q) for p, q in zip(a, b))
    assert any(not np.array_equal(p, q) for p, q in zip(a, plain))


def test_config_keeps_the_canonical_text_and_refuses_bad_ones():
    """TrainConfig stores the canonical augmentation text and refuses a bad one by name."""
    assert TrainConfig(epochs=1).augment == "none"
    assert TrainConfig(epochs=1, augment="turn+shift2").augment == "turn+shift2"
    assert TrainConfig(epochs=1, augment="shift2+turn").augment == "turn+shift2"
    with pytest.raises(InputError, match=r"augment 'spin': 'spin' is not a transform"):
        TrainConfig(epochs=1, augment="spin")


def test_fit_refuses_turns_of_non_square_images():
    """Quarter turns of 6x8 images stop fit before any training, naming the size."""
    rng = np.random.default_rng(0)
    x = rng.standard_normal((6, 6, 8, 1)).astype(np.float32)
    net = Network.from_arch("6x8gray/c2k3", 2, seed=0)
    with pytest.raises(InputError, match=r"turn needs square images, and these are 6x8"):
        fit(net, x, np.arange(6) % 2, TrainConfig(epochs=1, augment="turn"))


def test_copies_pass_over_each_image_that_many_times():
    """With copies=3 an epoch's batches hold every image three times, from one
    permutation of 3n items; copies=1 is the plain permutation."""
    x, y = _data(10, 5)
    x[:, 0, 0, 0] = np.arange(10)          # each image names itself
    net = Network.from_arch("8x8gray/c2k3-p2", 3, seed=0)
    rec = Recorder(net)
    hist = fit(net, x, y, TrainConfig(epochs=1, batch_size=4, lr=0.01, seed=9, copies=3))
    seen = np.concatenate([b[:, 0, 0, 0] for b in rec.seen[True]]).astype(int)
    assert sorted(seen.tolist()) == sorted(list(range(10)) * 3)
    expected = np.random.default_rng(9).permutation(30) % 10
    np.testing.assert_array_equal(seen, expected)
    assert [len(b) for b in rec.seen[True]] == [len(p) for p in np.array_split(expected, 8)]
    assert 0.0 <= hist.train_acc[0] <= 1.0
    with pytest.raises(InputError, match=r"copies must be an integer from 1 to 64, got 0"):
        TrainConfig(epochs=1, copies=0)
