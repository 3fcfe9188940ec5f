"""A training batch passed in parts (tinyconv.train.train_step with ``micro``)."""

import numpy as np
import pytest

from tinyconv.network import Network
from tinyconv.optim import SGD
from tinyconv.train import PART_BYTES, micro_batch, train_step


def _step(arch: str, micro):
    net = Network.from_arch(arch, 3, seed=4)
    rng = np.random.default_rng(7)
    h, w, c = net.arch.input.shape
    x = rng.standard_normal((10, h, w, c)).astype(np.float32)
    y = np.arange(10) % 3
    opt = SGD(net.param_list(), momentum=0.9)
    loss, right = train_step(net, x, y, opt, 0.05, 0.1, micro)
    return loss, right, [p.copy() for _, p in net.param_list()]


@pytest.mark.parametrize("micro", [1, 3, 4, 9])
def test_parts_give_the_whole_batch_step(micro):
    """Parts of 1, 3, 4 or 9 of a batch of 10 (uneven last parts too) give the same mean
    loss, count of right answers and updated weights as the whole batch at once: the
    parts' gradients, each weighted by its share, sum to the batch's (float32 sums in
    another order, so to a few units in the last place)."""
    arch = "12x12rgb/c6k3-p2-dw3-c8k1-gap-d5"
    loss, right, params = _step(arch, None)
    loss_p, right_p, params_p = _step(arch, micro)
    assert right_p == right
    assert loss_p == pytest.approx(loss, rel=1e-5)
    for a, b in zip(params, params_p):
        np.testing.assert_allclose(b, a, rtol=1e-4, atol=1e-6)


def test_parts_only_for_large_activations_and_never_with_batch_norm():
    """A batch whose training activations pass PART_BYTES is split into equal parts that
    each stay under it; a small one is not; batch norm (statistics over the whole batch)
    never is."""
    from tinyconv.cost import cost_of
    big = "96x96gray/c8k3s2-dw3-c16k1-p2-dw3-c32k1-p2-dw3-c64k1-gap"
    per_image = 4 * sum(r.live_elements for r in cost_of(big, 3).rows)
    micro = micro_batch(Network.from_arch(big, 3, seed=0), 64)
    assert micro < 64 and micro * per_image <= PART_BYTES
    assert micro_batch(Network.from_arch("32x32rgb/c16k3-p2-gap", 3, seed=0), 64) == 64
    with_bn = big.replace("c16k1", "c16k1-bn")
    assert micro_batch(Network.from_arch(with_bn, 3, seed=0), 64) == 64


def test_the_parts_are_a_divisor_of_the_batch_when_one_is_near_the_cap(monkeypatch):
    """With room for 22 images a part, a batch of 64 goes in parts of 16 (a divisor: one
    shape for every part); a batch of 61 (prime) in parts of 21, as equal as they come."""
    import tinyconv.train as train
    from tinyconv.cost import cost_of
    arch = "96x96gray/c8k3s2-dw3-c16k1-p2-dw3-c32k1-p2-dw3-c64k1-gap"
    per_image = 4 * sum(r.live_elements for r in cost_of(arch, 3).rows)
    monkeypatch.setattr(train, "PART_BYTES", 22 * per_image)
    net = Network.from_arch(arch, 3, seed=0)
    assert micro_batch(net, 64) == 16
    assert micro_batch(net, 61) == 21


def test_batch_norm_takes_the_whole_batch_even_when_asked_for_parts():
    """train_step with parts on a network with batch norm takes the whole batch (its
    statistics are the batch's): the same step as without parts, bit for bit."""
    arch = "12x12rgb/c6k3-bn-p2-gap-d5"
    loss, right, params = _step(arch, None)
    loss_p, right_p, params_p = _step(arch, 3)
    assert (loss_p, right_p) == (loss, right)
    for a, b in zip(params, params_p):
        np.testing.assert_array_equal(b, a)


def test_fit_trains_in_the_parts_micro_batch_gives(monkeypatch):
    """fit passes each batch to train_step with micro_batch's part size."""
    import tinyconv.train as train
    from tinyconv.train import TrainConfig, fit
    seen = []
    real = train.train_step

    def spy(net, batch, labels, opt, lr, smoothing=0.0, micro=None):
        seen.append(micro)
        return real(net, batch, labels, opt, lr, smoothing, micro)

    monkeypatch.setattr(train, "train_step", spy)
    monkeypatch.setattr(train, "micro_batch", lambda net, batch_size: 3)
    net = Network.from_arch("12x12rgb/c6k3-p2-gap-d5", 3, seed=1)
    rng = np.random.default_rng(2)
    x = rng.standard_normal((16, 12, 12, 3)).astype(np.float32)
    y = np.arange(16) % 3
    fit(net, x, y, TrainConfig(epochs=1, batch_size=8))
    assert seen and set(seen) == {3}
