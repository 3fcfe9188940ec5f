"""Network: building from text, whole-network gradients, save/load and its errors."""

import numpy as np
import pytest

from tinyconv.arch import expand, parse
from tinyconv.commands.gradients import shift_away_from_kinks
from tinyconv.errors import DataError
from tinyconv.gradients import check_network
from tinyconv.losses import softmax_cross_entropy
from tinyconv.network import Network
from tinyconv.train import TrainConfig, fit


def _data(arch_text, n, k, seed):
    rng = np.random.default_rng(seed)
    shape = parse(arch_text).input.shape
    return rng.standard_normal((n, *shape)), rng.integers(0, k, size=n)


def test_one_layer_per_op_with_contract_names_and_shapes():
    """Layers follow expand(); names are index:op.name/key; shapes as in DEVELOPERS.md."""
    text = "8x8rgb/c4k3-dw3s2-bn-d5"
    net = Network.from_arch(text, 3, seed=0)
    ops = expand(parse(text), 3)
    assert net.ops == ops and len(net.layers) == len(ops)
    assert [layer.name for layer in net.layers] == [op.name for op in ops]
    shapes = {name: a.shape for name, a in net.param_list()}
    assert shapes == {"0:1:c4k3/w": (3, 3, 3, 4), "0:1:c4k3/b": (4,),
                      "2:2:dw3s2/w": (3, 3, 4), "2:2:dw3s2/b": (4,),
                      "3:3:bn/gamma": (4,), "3:3:bn/beta": (4,),
                      "6:4:d5/w": (64, 5), "6:4:d5/b": (5,),
                      "8:head:dense/w": (5, 3), "8:head:dense/b": (3,)}
    assert [n for n, _ in net.state_list()] == ["3:3:bn/mean", "3:3:bn/var"]
    assert all(a.dtype == np.float32 for _, a in net.param_list())


@pytest.mark.parametrize("text", [
    "8x8gray/c4k3-p2-d8",              # convolution, max pool, hidden dense
    "9x9gray/c3k3s2-dw3-a2-gap",       # stride 2 on an odd size, depthwise, avg pool, gap
    "8x8rgb/dw3s2-c4k1-a2-bn-d6",      # batch norm on a map, then a hidden dense layer
    "7x7gray/c3k3v-x30-d5",            # valid padding, dropout (mask held fixed)
])
def test_whole_network_gradients_agree_with_finite_differences(text):
    """Every gradient through the loss agrees with central differences (float64, < 1e-6)."""
    x, y = _data(text, 3, 4, seed=1)
    net = Network.from_arch(text, 4, seed=2)
    # Zero initial biases can put pre-activations exactly on a ReLU kink; move them off.
    shift_away_from_kinks(net, np.random.default_rng(7))
    # Reference: central finite differences (tinyconv.gradients;
    # Nocedal & Wright §8.1 [from memory])
    rows = check_network(net, x, y, seed=3)
    assert len(rows) == 1 + len(net.param_list())
    bad = [(r.layer, r.tensor, r.max_rel_error, r.note) for r in rows if not r.passed]
    assert not bad


def test_bias_before_batch_norm_has_zero_gradient():
    """A conv bias directly before batch norm gets a zero gradient: the batch mean removes it."""
    text = "8x8gray/c4k3-bn-gap"
    x, y = _data(text, 4, 3, seed=4)
    net = Network.from_arch(text, 3, seed=0, dtype=np.float64)
    _, g = softmax_cross_entropy(net.forward(x, training=True), y)
    net.backward(g)
    grads = dict(net.grad_list())
    # Ioffe & Szegedy (ICML 2015): a bias before batch norm is cancelled by the mean subtraction.
    assert np.abs(grads["0:1:c4k3/b"]).max() < 1e-12 * np.abs(grads["0:1:c4k3/w"]).max() + 1e-15
    b = dict(net.param_list())["0:1:c4k3/b"]
    before = softmax_cross_entropy(net.forward(x, training=True), y)[0]
    b += 0.5
    assert softmax_cross_entropy(net.forward(x, training=True), y)[0] == pytest.approx(before,
                                                                                       abs=1e-12)


def test_save_load_round_trip_is_bit_exact(tmp_path):
    """Saved weights, state, meta and extra arrays load back bit for bit, with the same outputs."""
    text = "8x8gray/c4k3-bn-p2-d6"
    x, y = _data(text, 40, 3, seed=5)
    net = Network.from_arch(text, 3, seed=1)
    fit(net, x.astype(np.float32), y, TrainConfig(epochs=2, batch_size=10))
    mean, std = np.array([0.25], np.float32), np.array([0.5], np.float32)
    path = net.save(tmp_path / "model.npz", meta={"fold": 2, "classes": ["a", "b", "c"]},
                    arrays={"norm_mean": mean, "norm_std": std})
    assert path == tmp_path / "model.npz" and not list(tmp_path.glob("*.tmp"))
    saved = Network.load(path)
    other = saved.network
    assert str(other.arch) == text and other.n_classes == 3 and other.dtype == np.float32
    for (n1, a1), (n2, a2) in zip(net.param_list() + net.state_list(),
                                  other.param_list() + other.state_list()):
        assert n1 == n2 and a1.dtype == a2.dtype and np.array_equal(a1, a2)
    assert saved.meta == {"fold": 2, "classes": ["a", "b", "c"]}
    assert set(saved.arrays) == {"norm_mean", "norm_std"}
    assert np.array_equal(saved.arrays["norm_mean"], mean)
    xf = x.astype(np.float32)
    assert np.array_equal(net.forward(xf), other.forward(xf))
    # The file is plain arrays: NumPy reads it with pickling refused.
    with np.load(path, allow_pickle=False) as data:
        assert str(data["arch"]) == text and all(data[k].dtype != object for k in data.files)


def test_float64_network_saves_as_float64(tmp_path):
    """astype(float64) casts in place; a saved float64 network loads as float64."""
    net = Network.from_arch("6x6gray/c2k3", 2, seed=0)
    x = np.random.default_rng(0).standard_normal((2, 6, 6, 1)).astype(np.float32)
    out32 = net.forward(x)
    assert net.astype(np.float64) is net and net.dtype == np.float64
    out64 = net.forward(x)
    assert out64.dtype == np.float64
    np.testing.assert_allclose(out64, out32, rtol=1e-5, atol=1e-6)
    loaded = Network.load(net.save(tmp_path / "n64.npz")).network
    assert loaded.dtype == np.float64 and np.array_equal(loaded.forward(x), out64)


def test_load_weights_into_same_architecture(tmp_path):
    """load_weights copies every tensor into a network of the same text."""
    a = Network.from_arch("8x8gray/c4k3-bn-d6", 3, seed=1)
    b = Network.from_arch("8x8gray/c4k3-bn-d6", 3, seed=2)
    b.load_weights(a.save(tmp_path / "a.npz"))
    assert all(np.array_equal(p, q) for (_, p), (_, q) in zip(a.param_list(), b.param_list()))


def test_load_weights_into_another_architecture_names_the_layer(tmp_path):
    """A mismatch names the first differing layer and both shapes."""
    path = Network.from_arch("8x8gray/c4k3-p2-c8k3", 3).save(tmp_path / "small.npz")
    wider = Network.from_arch("8x8gray/c4k3-p2-c16k3", 3)
    with pytest.raises(DataError, match=r"small\.npz \(architecture '8x8gray/c4k3-p2-c8k3'\) "
                                        r"into '8x8gray/c4k3-p2-c16k3': the first mismatch is "
                                        r"layer 3:c16k3 parameter 'w' of shape \(3, 3, 4, 16\) "
                                        r"in this network against layer 3:c8k3 parameter 'w' "
                                        r"of shape \(3, 3, 4, 8\) in the file"):
        wider.load_weights(path)
    before = [a.copy() for _, a in wider.param_list()]
    assert all(np.array_equal(p, q) for (_, p), q in zip(wider.param_list(), before))


def test_load_weights_with_fewer_layers_names_what_is_missing(tmp_path):
    """A file with fewer tensors fails at the first layer it lacks."""
    path = Network.from_arch("8x8gray/c4k3", 3).save(tmp_path / "short.npz")
    deeper = Network.from_arch("8x8gray/c4k3-bn", 3)
    with pytest.raises(DataError, match=r"the first mismatch is layer 2:bn parameter 'gamma' of "
                                        r"shape \(4,\) in this network against layer head:dense"):
        deeper.load_weights(path)


def test_not_a_network_file_is_refused(tmp_path):
    """An .npz without the network entries, or a non-zip file, gets a clear DataError."""
    other = tmp_path / "other.npz"
    np.savez(other, a=np.zeros(3))
    with pytest.raises(DataError, match=r"other\.npz is not a tinyconv network file: it lacks "
                                        r"format, arch, n_classes"):
        Network.load(other)
    junk = tmp_path / "junk.npz"
    junk.write_text("hello")
    with pytest.raises(DataError, match=r"junk\.npz is not a readable \.npz network file"):
        Network.load(junk)
    good = Network.from_arch("8x8gray", 2).save(tmp_path / "good.npz")
    cut = tmp_path / "cut.npz"
    cut.write_bytes(good.read_bytes()[:200])  # a zip whose directory is lost
    with pytest.raises(DataError, match=r"cut\.npz is not a readable \.npz network file"):
        Network.load(cut)


def test_forward_refuses_the_wrong_image_shape():
    """Images of another size are refused naming both shapes."""
    net = Network.from_arch("8x8gray/c2k3", 2)
    with pytest.raises(DataError, match=r"images have shape \(1, 8, 8, 3\), but the network "
                                        r"8x8gray/c2k3 reads \(n, 8, 8, 1\)"):
        net.forward(np.zeros((1, 8, 8, 3), np.float32))


def test_unsaveable_meta_and_arrays_are_refused(tmp_path):
    """Meta that JSON cannot hold, or an object array, is refused before anything is written."""
    net = Network.from_arch("8x8gray", 2)
    with pytest.raises(DataError, match=r"meta for .*m\.npz is not JSON-serialisable: .*set"):
        net.save(tmp_path / "m.npz", meta={"classes": {"a", "b"}})
    with pytest.raises(DataError, match=r"extra array 'names' for .*m\.npz has dtype object"):
        net.save(tmp_path / "m.npz", arrays={"names": np.array([None, 1], dtype=object)})
    assert not list(tmp_path.iterdir())
