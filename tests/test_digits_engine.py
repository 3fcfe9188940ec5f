"""The engine on scikit-learn's bundled digits: a convex cross-check and a CNN accuracy floor."""

import numpy as np
import pytest
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import StratifiedKFold
from threadpoolctl import threadpool_limits

from tinyconv.losses import softmax_cross_entropy
from tinyconv.network import Network
from tinyconv.train import TrainConfig, evaluate, fit


@pytest.fixture(scope="module")
def digits():
    """Digits scaled to [0, 1]: 1,797 8x8 images, values 0-16, 10 classes (scikit-learn docs)."""
    data = load_digits()
    assert data.images.shape == (1797, 8, 8) and data.images.max() == 16
    return data.data / 16.0, data.target


@pytest.mark.slow
def test_softmax_regression_reaches_scikit_learns_penalised_optimum(digits):
    """Softmax regression with L2 reaches LogisticRegression's penalised loss (within 1e-3)."""
    x, y = digits
    n = len(y)
    c = 0.5
    # scikit-learn's LogisticRegression (lbfgs, multinomial) minimises
    #     C * sum_i CE_i + 1/2 ||W||^2        (intercept not penalised).
    # Dividing by C * n leaves the minimiser unchanged and gives
    #     mean_i CE_i + lambda/2 ||W||^2   with lambda = 1 / (C n),
    # which is what our training minimises with decay="l2" and weight_decay=lambda
    # (the optimiser adds lambda * W to the gradient of weight tensors only,
    # so the bias is unpenalised too). The problem is strictly convex, so both
    # must find the same optimum.
    lam = 1.0 / (c * n)

    def penalised(w, b):
        """Our objective on weights (64, 10) and bias (10,), the same formula for both."""
        return softmax_cross_entropy(x @ w + b, y)[0] + 0.5 * lam * float(np.sum(w * w))

    with threadpool_limits(1):
        # Reference: scikit-learn LogisticRegression, lbfgs (multinomial for 10 classes)
        ref = LogisticRegression(C=c, solver="lbfgs", tol=1e-8, max_iter=2000).fit(x, y)
        want = penalised(ref.coef_.T, ref.intercept_)

        # `8x8gray` is the head alone: flatten + dense 64 -> 10, i.e. softmax regression.
        net = Network.from_arch("8x8gray", 10, seed=0, dtype=np.float64)
        # Full-batch gradient descent with momentum until convergence.
        hist = fit(net, x.reshape(-1, 8, 8, 1), y,
                   TrainConfig(epochs=500, batch_size=n, optimizer="sgd", lr=2.0, momentum=0.9,
                               weight_decay=lam, decay="l2"))
    assert hist.status == "done"
    head = net.layers[-1].params
    got = penalised(head["w"], head["b"])
    assert abs(got - want) / want < 1e-3
    # One optimum: the weights agree too (loosely; the loss is flat near it).
    assert np.linalg.norm(head["w"] - ref.coef_.T) / np.linalg.norm(ref.coef_) < 0.05


@pytest.mark.slow
def test_small_cnn_reaches_097_over_five_stratified_folds(digits):
    """A small CNN scores >= 0.97 mean accuracy over 5 stratified folds."""
    x, y = digits
    x = x.reshape(-1, 8, 8, 1).astype(np.float32)
    accs = []
    # Reference folds: scikit-learn StratifiedKFold
    folds = StratifiedKFold(n_splits=5, shuffle=True, random_state=0).split(x, y)
    with threadpool_limits(1):
        for k, (train, test) in enumerate(folds):
            # Normalisation statistics from the training part only (common practice).
            mean, std = x[train].mean(), x[train].std()
            net = Network.from_arch("8x8gray/c16k3-p2-c32k3-p2", 10, seed=k)
            fit(net, (x[train] - mean) / std, y[train],
                TrainConfig(epochs=15, batch_size=32, lr=3e-3, schedule="cosine", seed=k))
            accs.append(evaluate(net, (x[test] - mean) / std, y[test])[1])
    # Digits accuracy bands [from memory]: RBF SVM about 0.98, a small CNN 0.98-0.99.
    assert np.mean(accs) >= 0.97, accs
