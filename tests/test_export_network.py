"""export_network: the files it writes and the figures in its summary."""

import json

import numpy as np
import pytest

from tinyconv.arch import ArchError
from tinyconv.cost import cost_of
from tinyconv.errors import DataError, InputError
from tinyconv.export import export_network
from tinyconv.export.summary import ExportSummary
from tinyconv.network import Network
from tinyconv.quant import int8_predict, quantize_network

TEXT = "10x10rgb/c4k3-bn-p2-d6"


def setup(text=TEXT, k=3, seed=0):
    rng = np.random.default_rng(seed)
    net = Network.from_arch(text, k, seed=seed)
    images = rng.integers(0, 256, (40, *net.arch.input.shape), dtype=np.uint8)
    labels = rng.integers(0, k, 40)
    return net, np.full(3, 0.45), np.full(3, 0.25), images, labels


def test_writes_weights_code_and_summary(tmp_path):
    """The five files appear (calibration images too); the summary's figures are the cost model's and the data's."""
    net, mean, std, images, labels = setup()
    s = export_network(net, mean, std, images[:20], tmp_path / "out", prefix="unit",
                       classes=["a", "b", "c"], eval_images=images[20:], eval_labels=labels[20:])
    names = sorted(p.name for p in (tmp_path / "out").iterdir())
    assert names == ["calibration.npz", "network.npz", "summary.json", "unit.c", "unit.h"]
    cost = cost_of(TEXT, 3)
    assert (s.flash_bytes, s.activation_bytes, s.macs, s.params) == (
        cost.flash_bytes, cost.peak_int8_bytes, cost.macs, cost.params)
    assert s.classes == ("a", "b", "c") and s.n_calib == 20 and s.n_eval == 20
    # the summary's accuracies are those of the integer reference and the float network
    qnet = quantize_network(net, mean, std, images[:20])
    assert s.int8_accuracy == pytest.approx(np.mean(int8_predict(qnet, images[20:]) == labels[20:]))
    assert ExportSummary.from_json((tmp_path / "out" / "summary.json").read_text()) == s
    saved = Network.load(tmp_path / "out" / "network.npz")
    np.testing.assert_allclose(saved.arrays["norm_std"], std)
    x = np.random.default_rng(1).normal(size=(3, 10, 10, 3)).astype(np.float32)
    np.testing.assert_array_equal(saved.network.forward(x), net.forward(x))
    assert saved.meta["classes"] == ["a", "b", "c"]


def test_without_held_out_data(tmp_path):
    """With no evaluation images the summary has no agreement and says nothing of it."""
    net, mean, std, images, _ = setup()
    s = export_network(net, mean, std, images, tmp_path)
    assert s.n_eval == 0 and s.agreement is None and s.classes == ("0", "1", "2")
    assert not any("agreement" in line for line in s.lines())
    assert json.loads(s.to_json())["agreement"] is None


def test_refusals(tmp_path):
    """Unfoldable batch norm, bad labels and bad prefixes are refused before writing."""
    net, mean, std, images, labels = setup("10x10rgb/c4k3-p2-bn")
    with pytest.raises(ArchError, match="layer 3 'bn' follows 'p2'"):
        export_network(net, mean, std, images, tmp_path / "a")
    net, mean, std, images, labels = setup()
    with pytest.raises(DataError, match="3 labels for 40 held-out images"):
        export_network(net, mean, std, images, tmp_path / "b", eval_images=images,
                       eval_labels=labels[:3])
    with pytest.raises(InputError, match="prefix 'my-net' is not a usable C identifier"):
        export_network(net, mean, std, images, tmp_path / "c", prefix="my-net")
    assert not any((tmp_path / d).exists() for d in "abc")


def test_a_failed_write_leaves_no_partial_file(tmp_path, monkeypatch):
    """A write that fails mid-way (here: the disk reports no space, errno ENOSPC, POSIX)
    is a named error and leaves no partial file beside the targets."""
    import errno

    import tinyconv.files as files
    from tinyconv.errors import WriteError
    from tinyconv.export import export_network
    from tinyconv.network import Network

    net = Network.from_arch("8x8gray/c4k3-gap", 3)
    images = np.random.default_rng(0).integers(0, 256, (16, 8, 8, 1), dtype=np.uint8)
    real_replace = files.os.replace

    def full_disk(src, dst):
        if str(dst).endswith("tc.h"):
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_replace(src, dst)

    monkeypatch.setattr(files.os, "replace", full_disk)
    with pytest.raises(WriteError, match=r"cannot write .*tc\.h: the disk is full.*export again"):
        export_network(net, [0.5], [0.25], images, tmp_path / "out")
    assert not [p for p in (tmp_path / "out").iterdir() if p.name.startswith(".partial-")]
