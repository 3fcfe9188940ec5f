"""The gradients command: table, exit codes, input override, bad texts."""

import re

from tinyconv.cli import main
from tinyconv.layers.dense import Dense


def _rows(out):
    """Table rows (after the dashed rule) as lists of cells."""
    lines = out.splitlines()
    start = next(i for i, line in enumerate(lines) if re.fullmatch(r"[- ]+", line) and "-" in line)
    rows = []
    for line in lines[start + 1:]:
        if not line.strip():
            break
        rows.append(line.split())
    return rows


def test_reference_network_passes_and_prints_the_table(capsys):
    """The issue's example network exits 0 with one 'pass' row per tensor and the kink note."""
    code = main(["gradients", "16x16gray/c4k3-p2-c8k3s2-bn-gap-d8"])
    out = capsys.readouterr().out
    assert code == 0
    assert re.search(r"layer\s+tensor\s+shape\s+max rel error\s+verdict", out)
    rows = _rows(out)
    # input, then conv w/b, conv w/b, bn gamma/beta, dense w/b, head w/b
    assert [(r[0], r[1]) for r in rows] == [
        ("input", "x"), ("0:1:c4k3", "w"), ("0:1:c4k3", "b"), ("3:3:c8k3s2", "w"),
        ("3:3:c8k3s2", "b"), ("4:4:bn", "gamma"), ("4:4:bn", "beta"), ("7:6:d8", "w"),
        ("7:6:d8", "b"), ("9:head:dense", "w"), ("9:head:dense", "b")]
    assert [r[2] for r in rows][:4] == ["4x16x16x1", "3x3x1x4", "4", "3x3x4x8"]
    assert all(r[4] == "pass" and float(r[3]) < 1e-6 for r in rows)
    assert "float64" in out and "kink" in out and "all 11 tensors pass" in out


def test_input_option_replaces_the_texts_input(capsys):
    """--input swaps the input size and colour mode; --classes and --batch shape the rows."""
    code = main(["gradients", "16x16gray/c2k3-d4", "--input", "6x6rgb", "--classes", "3",
                 "--batch", "2", "--seed", "5"])
    out = capsys.readouterr().out
    assert code == 0
    assert "gradient check of 6x6rgb/c2k3-d4 with 3 classes" in out
    rows = {(r[0], r[1]): r[2] for r in _rows(out)}
    assert rows[("input", "x")] == "2x6x6x3"
    assert rows[("0:1:c2k3", "w")] == "3x3x3x2"
    assert rows[("5:head:dense", "w")] == "4x3"
    assert rows[("3:2:d4", "w")] == "72x4"


def test_a_wrong_gradient_exits_1(capsys, monkeypatch):
    """A dense layer whose weight gradient is 1 % off makes that tensor FAIL and exit 1."""
    right = Dense.backward

    def wrong(self, grad_out):
        grad_x = right(self, grad_out)
        self.grads["w"] = self.grads["w"] * 1.01
        return grad_x

    monkeypatch.setattr(Dense, "backward", wrong)
    code = main(["gradients", "8x8gray/c2k3-p2"])
    out = capsys.readouterr().out
    assert code == 1
    verdicts = {(r[0], r[1]): r[4] for r in _rows(out)}
    assert verdicts[("4:head:dense", "w")] == "FAIL"
    assert verdicts[("0:1:c2k3", "w")] == "pass"
    assert "1 of 5 tensors FAIL: 4:head:dense/w" in out


def test_bad_text_exits_2_pointing_at_the_token(capsys):
    """A bad layer token exits 2 and the message names its position and the token."""
    code = main(["gradients", "16x16gray/c4k3-p2-c8k4-gap"])
    err = capsys.readouterr().err
    assert code == 2
    assert re.search(r"error: .*layer 3 'c8k4': kernel 4 is even", err)


def test_bad_options_exit_2(capsys):
    """A bad --input, --classes 1 or a one-image batch with batch norm exit 2 with the rule."""
    assert main(["gradients", "8x8gray/c2k3", "--input", "8x8bw"]) == 2
    assert "unknown colour mode 'bw'" in capsys.readouterr().err
    assert main(["gradients", "8x8gray/c2k3", "--classes", "1"]) == 2
    assert "--classes must be at least 2, got 1" in capsys.readouterr().err
    assert main(["gradients", "8x8gray/c2k3-bn", "--batch", "1"]) == 2
    assert "--batch must be at least 2 (batch normalisation needs two images)" in \
        capsys.readouterr().err


def test_input_override_that_does_not_fit_exits_2(capsys):
    """An --input too small for the layers exits 2 naming the layer that no longer fits."""
    assert main(["gradients", "16x16gray/c2k3-p4-p4", "--input", "8x8gray"]) == 2
    assert re.search(r"layer 3 'p4': pool size 4 is larger than the map 2x2",
                     capsys.readouterr().err)



def test_conv_option_forces_and_reports_the_algorithm(capsys, monkeypatch):
    """--conv forces an algorithm on the layers that can run it, says so, and checks that path."""
    import tinyconv.layers.convalg.winograd as winograd
    text = "8x8gray/c16k3-c16k3-c16k3s2-c16k3-gap"
    assert main(["gradients", text]) == 0   # c_in 1, 16 on 8 x 8, stride 2, 16 on 4 x 4
    assert ("convolutions: 0:1:c16k3 im2col, 2:2:c16k3 winograd4, 4:3:c16k3s2 im2col, "
            "6:4:c16k3 winograd") in capsys.readouterr().out
    assert main(["gradients", text, "--conv", "winograd"]) == 0
    assert ("convolutions: 0:1:c16k3 winograd, 2:2:c16k3 winograd, 4:3:c16k3s2 im2col, "
            "6:4:c16k3 winograd") in capsys.readouterr().out
    # The forced path is the one checked: a broken F(4x4) filter adjoint fails the check.
    broken = staticmethod(lambda du: 1.01 * winograd.kw4.filter_transform_adjoint(du))
    monkeypatch.setattr(winograd._F4, "filter_transform_adjoint", broken)
    assert main(["gradients", text, "--conv", "winograd4"]) == 1
    assert "FAIL" in capsys.readouterr().out
    assert main(["gradients", text, "--conv", "im2col"]) == 0
