"""The training loop: learning, chance level, determinism, early stopping, divergence."""

import math

import numpy as np
import pytest
from threadpoolctl import threadpool_limits

from tinyconv.errors import DataError, InputError
from tinyconv.losses import softmax, softmax_cross_entropy
from tinyconv.network import Network
from tinyconv.train import TrainConfig, evaluate, fit, predict_proba


def _quadrants(n, seed):
    """8x8 images with a bright 3x3 spot in the quadrant named by the label (4 classes)."""
    rng = np.random.default_rng(seed)
    y = np.arange(n) % 4
    x = rng.normal(0.0, 0.3, size=(n, 8, 8, 1))
    for i, label in enumerate(y):
        r = (label // 2) * 4 + rng.integers(0, 2)
        c = (label % 2) * 4 + rng.integers(0, 2)
        x[i, r:r + 3, c:c + 3, 0] += 2.0
    return x.astype(np.float32), y


def test_training_learns_an_easy_task():
    """A small network learns the quadrant task: loss falls and held-out accuracy exceeds 0.9."""
    x, y = _quadrants(400, 0)
    xv, yv = _quadrants(200, 1)
    net = Network.from_arch("8x8gray/c4k3-p2", 4, seed=0)
    hist = fit(net, x, y, TrainConfig(epochs=6, batch_size=32, lr=0.01), xv, yv)
    assert hist.status == "done" and hist.epochs == 6
    assert hist.train_loss[-1] < 0.5 * hist.train_loss[0]
    assert hist.held_acc[-1] > 0.9
    assert evaluate(net, xv, yv) == pytest.approx((hist.held_loss[-1], hist.held_acc[-1]))


def test_untrained_network_scores_near_chance():
    """Untrained networks on balanced classes score near 1/K (chance level: fact of the trade)."""
    k = 4
    x, y = _quadrants(800, 2)
    accs = [evaluate(Network.from_arch("8x8gray/c4k3-p2-d8", k, seed=s), x, y)[1]
            for s in range(6)]
    # Each untrained network's prediction ignores the labels, and every class
    # holds 1/K of the images, so whatever it predicts scores 1/K on average.
    assert abs(np.mean(accs) - 1 / k) < 0.06


def test_same_seed_gives_bit_identical_weights():
    """Two trainings with one seed end with identical weights; another seed differs."""
    x, y = _quadrants(150, 3)
    cfg = TrainConfig(epochs=2, batch_size=16, lr=0.01, weight_decay=1e-3)

    def train(seed):
        net = Network.from_arch("8x8gray/c4k3-bn-x20-gap", 4, seed=0)
        fit(net, x, y, TrainConfig(**{**cfg.__dict__, "seed": seed}))
        return [a.copy() for _, a in net.param_list() + net.state_list()]

    with threadpool_limits(1):
        a, b, c = train(5), train(5), train(6)
    assert all(np.array_equal(p, q) for p, q in zip(a, b))
    assert not all(np.array_equal(p, q) for p, q in zip(a, c))


def test_huge_learning_rate_is_reported_as_diverged():
    """A learning rate of 1e12 gives status 'diverged' at epoch 1 and no garbage weights."""
    x, y = _quadrants(128, 4)
    net = Network.from_arch("8x8gray/c4k3-d16", 4, seed=0)
    start = [a.copy() for _, a in net.param_list()]
    hist = fit(net, x, y, TrainConfig(epochs=5, batch_size=16, optimizer="sgd", lr=1e12))
    assert hist.status == "diverged" and hist.diverged_epoch == 1
    assert hist.train_loss == () and hist.epochs == 0
    # The weights are those from before the epoch that diverged.
    assert all(np.array_equal(p, q) for (_, p), q in zip(net.param_list(), start))


def test_divergence_reports_the_epoch_it_happened():
    """Weights blown up after epoch 2 give diverged_epoch 3 and stop with two epochs logged."""
    x, y = _quadrants(64, 5)
    net = Network.from_arch("8x8gray/c4k3-p2", 4, seed=0)
    seen = []

    def blow_up(epoch, stats):
        seen.append(epoch)
        if epoch == 2:
            for _, a in net.param_list():
                a *= np.float32(1e30)   # float32 overflow to inf in the next forward

    with np.errstate(all="ignore"):
        hist = fit(net, x, y, TrainConfig(epochs=6, batch_size=16), on_epoch=blow_up)
    assert hist.status == "diverged" and hist.diverged_epoch == 3
    assert hist.epochs == 2 and seen == [1, 2]


def test_early_stopping_restores_the_best_epoch():
    """Random labels: held-out loss rises; stop after `patience` epochs with the best weights back."""
    rng = np.random.default_rng(6)
    x = rng.normal(size=(120, 8, 8, 1)).astype(np.float32)
    y = rng.integers(0, 4, size=120)
    xv = rng.normal(size=(80, 8, 8, 1)).astype(np.float32)
    yv = rng.integers(0, 4, size=80)
    net = Network.from_arch("8x8gray/d64", 4, seed=0)
    hist = fit(net, x, y, TrainConfig(epochs=40, batch_size=20, lr=0.01, patience=3), xv, yv)
    assert hist.status == "stopped" and hist.epochs < 40
    best = int(np.argmin(hist.held_loss)) + 1
    assert hist.best_epoch == best and hist.epochs == best + 3
    assert evaluate(net, xv, yv)[0] == pytest.approx(hist.held_loss[best - 1], rel=1e-6)


def test_on_epoch_can_stop_training():
    """A callback returning True stops after that epoch with status 'stopped'."""
    x, y = _quadrants(64, 7)
    net = Network.from_arch("8x8gray", 4, seed=0)
    hist = fit(net, x, y, TrainConfig(epochs=10, batch_size=32),
               on_epoch=lambda epoch, stats: epoch == 2)
    assert hist.status == "stopped" and hist.epochs == 2


def test_predict_proba_is_the_softmax_of_the_logits_in_any_batch():
    """Probabilities equal softmax(forward) and do not depend on the batch size."""
    x, y = _quadrants(70, 8)
    net = Network.from_arch("8x8gray/c4k3-bn-p2", 4, seed=1, dtype=np.float64)
    fit(net, x, y, TrainConfig(epochs=1, batch_size=10))
    p7 = predict_proba(net, x, batch=7)
    np.testing.assert_allclose(p7, softmax(net.forward(x.astype(np.float64))), rtol=1e-12)
    np.testing.assert_allclose(p7, predict_proba(net, x, batch=1000), rtol=1e-12)
    np.testing.assert_allclose(p7.sum(axis=1), 1.0, rtol=1e-12)
    loss, acc = evaluate(net, x, y, batch=9)
    assert loss == pytest.approx(softmax_cross_entropy(net.forward(x), y)[0], rel=1e-12)
    assert acc == np.mean(p7.argmax(axis=1) == y)


def test_smoothing_sgd_and_schedules_run_and_stay_finite():
    """SGD with L2 decay, label smoothing and a cosine schedule trains to finite figures."""
    x, y = _quadrants(96, 9)
    net = Network.from_arch("8x8gray/c4k3-a2", 4, seed=2)
    hist = fit(net, x, y, TrainConfig(epochs=3, batch_size=32, optimizer="sgd", lr=0.05,
                                      weight_decay=1e-3, decay="l2", schedule="cosine",
                                      label_smoothing=0.1))
    assert hist.status == "done" and all(map(math.isfinite, hist.train_loss))


def test_bad_settings_and_data_are_refused():
    """Bad config values, patience without held-out data and wrong shapes get clear errors."""
    with pytest.raises(InputError, match=r"optimizer 'rms' is unknown; expected one of adam, sgd"):
        TrainConfig(epochs=1, optimizer="rms")
    with pytest.raises(InputError, match=r"learning rate must be a finite number > 0, got -1\.0"):
        TrainConfig(epochs=1, lr=-1)
    with pytest.raises(InputError, match=r"epochs must be an integer >= 1, got 0"):
        TrainConfig(epochs=0)
    with pytest.raises(InputError, match=r"batch size must be an integer, got 3\.5"):
        TrainConfig(epochs=1, batch_size=3.5)
    # NumPy numbers (e.g. from a pandas table) are accepted and stored as Python numbers.
    cfg = TrainConfig(epochs=np.int64(3), lr=np.float32(0.5))
    assert type(cfg.epochs) is int and type(cfg.lr) is float and cfg.lr == 0.5
    x, y = _quadrants(8, 10)
    net = Network.from_arch("8x8gray", 4)
    with pytest.raises(InputError, match=r"early stopping \(patience=2\) needs held-out data"):
        fit(net, x, y, TrainConfig(epochs=1, patience=2))
    with pytest.raises(DataError, match=r"training images have shape \(8, 8, 8, 3\), but the "
                                        r"network 8x8gray reads \(n, 8, 8, 1\)"):
        fit(net, np.repeat(x, 3, axis=3), y, TrainConfig(epochs=1))
    with pytest.raises(DataError, match=r"training labels must be in 0\.\.3 for a network of "
                                        r"4 classes, got values 0\.\.4"):
        fit(net, x, np.minimum(y + 1, 4) * (y > 0), TrainConfig(epochs=1))


def test_eval_batch_follows_the_largest_activation():
    """Evaluation batches shrink as the largest activation grows, within the limits."""
    from tinyconv.network import Network
    from tinyconv.eval_batches import EVAL_BATCH_LIMITS, eval_batch
    sizes = [eval_batch(Network.from_arch(t, 4)) for t in
             ("8x8gray/c4k3-gap", "32x32rgb/c16k3-p2-gap", "64x64rgb/c16k3-p2-gap",
              "96x96rgb/c64k3-gap")]
    assert sizes == [256, 32, 8, 8]
    assert all(EVAL_BATCH_LIMITS[0] <= s <= EVAL_BATCH_LIMITS[1] for s in sizes)


def test_evaluation_does_not_depend_on_the_batch():
    """Predictions and accuracy are the same at the chosen batch and at 256 images."""
    from tinyconv.network import Network
    from tinyconv.train import eval_batch, evaluate, predict_proba
    net = Network.from_arch("32x32rgb/c16k3-p2-c16k3-gap", 3, seed=1)
    rng = np.random.default_rng(2)
    x = rng.standard_normal((300, 32, 32, 3)).astype(np.float32)
    y = rng.integers(0, 3, 300)
    assert eval_batch(net) < 256
    np.testing.assert_array_equal(predict_proba(net, x).argmax(1),
                                  predict_proba(net, x, batch=256).argmax(1))
    np.testing.assert_allclose(evaluate(net, x, y), evaluate(net, x, y, batch=256), rtol=1e-6)
