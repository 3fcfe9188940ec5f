"""Softmax cross-entropy against SciPy, a direct formula and finite differences."""

import numpy as np
import pytest
from scipy import special

from tinyconv.errors import InputError
from tinyconv.losses import log_softmax, softmax, softmax_cross_entropy


def _batch(seed, n=7, k=5, scale=3.0, dtype=np.float64):
    rng = np.random.default_rng(seed)
    return (rng.normal(size=(n, k)) * scale).astype(dtype), rng.integers(0, k, size=n)


def test_loss_matches_direct_float64_formula():
    """Mean of -log(exp(z_y) / sum exp(z)) written out plainly in float64."""
    z, y = _batch(0)
    direct = np.mean([-np.log(np.exp(z[i, y[i]]) / np.exp(z[i]).sum()) for i in range(len(y))])
    loss, _ = softmax_cross_entropy(z, y)
    assert loss == pytest.approx(direct, rel=1e-12)


@pytest.mark.parametrize("eps", [0.0, 0.1, 0.3])
def test_loss_matches_scipy_log_softmax_with_smoothing(eps):
    """Loss with q' = (1-eps) onehot + eps/K equals the SciPy log_softmax cross-entropy."""
    z, y = _batch(1, n=9, k=4)
    k = z.shape[1]
    q = np.full(z.shape, eps / k)
    q[np.arange(len(y)), y] += 1.0 - eps          # Szegedy et al., CVPR 2016
    # Reference: scipy.special.log_softmax
    want = -(q * special.log_softmax(z, axis=1)).sum(axis=1).mean()
    loss, _ = softmax_cross_entropy(z, y, smoothing=eps)
    assert loss == pytest.approx(want, rel=1e-12)


def test_log_softmax_and_softmax_match_scipy():
    """log_softmax equals z - scipy.special.logsumexp(z); softmax equals scipy.special.softmax."""
    z, _ = _batch(2, n=6, k=8, scale=20.0)
    # Reference: scipy.special.logsumexp and scipy.special.softmax
    np.testing.assert_allclose(log_softmax(z), z - special.logsumexp(z, axis=1, keepdims=True),
                               rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(softmax(z), special.softmax(z, axis=1), rtol=1e-12, atol=1e-15)


@pytest.mark.parametrize("eps", [0.0, 0.2])
def test_gradient_matches_central_differences(eps):
    """Analytic gradient agrees with central finite differences in float64."""
    # Moderate logits keep every gradient entry well above the rounding noise
    # of the difference quotient (about 1e-16 * loss / h).
    z, y = _batch(3, n=5, k=6, scale=1.0)
    _, grad = softmax_cross_entropy(z, y, smoothing=eps)
    h = 1e-5  # central difference, error O(h^2) (Nocedal & Wright §8.1 [from memory])
    numeric = np.zeros_like(z)
    for idx in np.ndindex(z.shape):
        zp, zm = z.copy(), z.copy()
        zp[idx] += h
        zm[idx] -= h
        numeric[idx] = (softmax_cross_entropy(zp, y, eps)[0]
                        - softmax_cross_entropy(zm, y, eps)[0]) / (2 * h)
    rel = np.abs(grad - numeric) / np.maximum(np.maximum(np.abs(grad), np.abs(numeric)), 1e-12)
    assert rel.max() < 1e-6


def test_gradient_is_softmax_minus_smoothed_target():
    """Gradient equals (softmax - q') / n, the closed form of Szegedy et al. (CVPR 2016)."""
    z, y = _batch(4, n=4, k=3)
    eps, k = 0.1, 3
    q = np.full(z.shape, eps / k)
    q[np.arange(4), y] += 1 - eps
    _, grad = softmax_cross_entropy(z, y, smoothing=eps)
    # Reference: scipy.special.softmax for the probabilities
    np.testing.assert_allclose(grad, (special.softmax(z, axis=1) - q) / 4, rtol=1e-12, atol=1e-15)


def test_smoothed_loss_is_smallest_at_the_smoothed_target():
    """With smoothing the minimum sits at softmax = q', where the loss is the entropy of q'."""
    k, eps = 4, 0.2
    q = np.full(k, eps / k)
    q[2] += 1 - eps
    z = np.log(q)[None, :]
    loss, grad = softmax_cross_entropy(z, np.array([2]), smoothing=eps)
    # Reference: scipy.special.entr gives -q log q, the entropy terms (Gibbs' inequality)
    assert loss == pytest.approx(special.entr(q).sum(), rel=1e-12)
    assert np.abs(grad).max() < 1e-15
    worse, _ = softmax_cross_entropy(z + np.array([[0, 0, 0.5, 0]]), np.array([2]), eps)
    assert worse > loss


@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_huge_logits_stay_finite(dtype):
    """Logits of 1e4 give a finite loss and gradient that match SciPy's logsumexp."""
    z = np.array([[1e4, 0.0, -1e4], [1e4, 1e4 - 3.0, 0.0]], dtype=dtype)
    y = np.array([1, 1])
    loss, grad = softmax_cross_entropy(z, y, smoothing=0.1)
    assert np.isfinite(loss) and np.isfinite(grad).all()
    assert grad.dtype == dtype
    z64 = z.astype(np.float64)
    q = np.full(z.shape, 0.1 / 3)
    q[[0, 1], y] += 0.9
    # Reference: scipy.special.logsumexp
    want = -(q * (z64 - special.logsumexp(z64, axis=1, keepdims=True))).sum(axis=1).mean()
    assert loss == pytest.approx(want, rel=1e-6)


def test_gradient_rows_sum_to_zero():
    """Each row of softmax - q' sums to 0, as both distributions sum to 1."""
    z, y = _batch(5, n=10, k=7)
    _, grad = softmax_cross_entropy(z, y, smoothing=0.15)
    np.testing.assert_allclose(grad.sum(axis=1), 0.0, atol=1e-15)


def test_bad_label_is_named():
    """A label outside 0..K-1 is refused with the value and the rule."""
    z, _ = _batch(6, n=3, k=4)
    with pytest.raises(InputError, match=r"label 4 is outside 0\.\.3 for 4 classes"):
        softmax_cross_entropy(z, np.array([0, 4, 1]))


def test_bad_smoothing_is_refused():
    """Label smoothing outside [0, 1) is refused with the value and a fix."""
    z, y = _batch(7)
    with pytest.raises(InputError, match=r"label smoothing must be in \[0, 1\), got 1\.0; use 0"):
        softmax_cross_entropy(z, y, smoothing=1.0)
