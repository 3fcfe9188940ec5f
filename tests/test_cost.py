"""Tests of tinyconv.cost and the ``tinyconv cost`` command.

Outside sources: the textbook counts of parameters and multiply-accumulates
(common practice: conv k*k*c_in*f + f parameters and h_out*w_out*k*k*c_in*f
MACs; depthwise k*k*c + c; dense n_in*n_out + n_out), the peak-memory rule
and worked example of ../shared/CHECKS.md (Liberis & Lane 2019 [from memory]),
and the reference networks N1-N4 of ../shared/BENCHMARKS.md.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from tinyconv.arch import ArchError, expand, parse
from tinyconv.cli import main
from tinyconv.cost import cost_of, totals_of, training_memory
from tinyconv.errors import InputError
from tinyconv.network import Network


def conv_params(k: int, c_in: int, f: int) -> int:
    """Textbook conv parameters (common practice)."""
    return k * k * c_in * f + f


def conv_macs(h_out: int, w_out: int, k: int, c_in: int, f: int) -> int:
    """Textbook conv MACs (common practice)."""
    return h_out * w_out * k * k * c_in * f


def dense_params(n_in: int, n_out: int) -> int:
    """Textbook dense parameters (common practice)."""
    return n_in * n_out + n_out


# ---------------------------------------------------------------- formulas


def test_each_kind_matches_the_textbook_formulas():
    """Per-op params and MACs of conv, depthwise, dense and bn equal hand-computed formulas."""
    cost = cost_of("32x32rgb/c8k3s2-bn-dw5-c16k1-p2-d20", 6)
    by_name = {(r.name, r.kind): r for r in cost.rows}
    # c8k3s2 on 32x32x3: same padding, stride 2 -> 16x16x8 (common practice)
    assert by_name["1:c8k3s2", "conv"].params == conv_params(3, 3, 8) == 224
    assert by_name["1:c8k3s2", "conv"].macs == conv_macs(16, 16, 3, 3, 8) == 55_296
    # batch norm: gamma, beta trained; mean, var state
    assert (by_name["2:bn", "bn"].params, by_name["2:bn", "bn"].state) == (16, 16)
    # depthwise 5x5 on 16x16x8: k*k*c + c params, h*w*k*k*c MACs (common practice)
    assert by_name["3:dw5", "dwconv"].params == 5 * 5 * 8 + 8 == 208
    assert by_name["3:dw5", "dwconv"].macs == 16 * 16 * 5 * 5 * 8 == 51_200
    assert by_name["4:c16k1", "conv"].params == conv_params(1, 8, 16) == 144
    assert by_name["4:c16k1", "conv"].macs == conv_macs(16, 16, 1, 8, 16) == 32_768
    # p2 -> 8x8x16 = 1024 features; d20; head 20 -> 6
    assert by_name["6:d20", "dense"].params == dense_params(1024, 20) == 20_500
    assert by_name["6:d20", "dense"].macs == 1024 * 20
    assert by_name["head:dense", "dense"].params == dense_params(20, 6) == 126
    assert cost.params == 224 + 16 + 208 + 144 + 20_500 + 126
    assert cost.state == 16
    assert cost.macs == 55_296 + 51_200 + 32_768 + 1024 * 20 + 20 * 6
    for row in cost.rows:
        if row.kind in ("relu", "maxpool", "avgpool", "gap", "flatten", "dropout", "input"):
            assert row.params == row.macs == 0, row


def test_valid_padding_output_sizes_enter_the_macs():
    """A valid 5x5 conv on 12x12 gives 8x8 outputs: floor((12 - 5) / 1) + 1 (common practice)."""
    cost = cost_of("12x12gray/c4k5v-c2k3s2v", 3)
    conv1, conv2 = [r for r in cost.rows if r.kind == "conv"]
    assert conv1.out_shape == (8, 8, 4) and conv1.macs == conv_macs(8, 8, 5, 1, 4)
    # floor((8 - 3) / 2) + 1 = 3
    assert conv2.out_shape == (3, 3, 2) and conv2.macs == conv_macs(3, 3, 3, 4, 2)


@pytest.mark.parametrize("text, params, macs", [
    # ../shared/BENCHMARKS.md, reference networks at 10 classes
    ("32x32rgb", 30_730, 30_720),                                    # N1
    ("32x32rgb/c8k3-p2-c16k3-p2", 11_642, 526_336),                  # N2
    ("32x32rgb/c32k3-p2-c64k3-p2-d64", 282_250, 5_866_112),          # N3
    # N4: the text form puts a ReLU after the depthwise conv, which the table
    # does not; ReLU has no parameters or MACs, so the counts are unchanged.
    ("32x32rgb/c16k3-p2-dw3-c32k1-p2-gap", 1_482, 610_624),          # N4
])
def test_reference_networks(text, params, macs):
    """Parameters and MACs of N1-N4 equal the figures of BENCHMARKS.md."""
    cost = cost_of(text, 10)
    assert (cost.params, cost.macs) == (params, macs)


# ---------------------------------------------------------------- memory and flash


def test_peak_memory_worked_example():
    """CHECKS.md: 32x32x1 int8, conv3x3->8 needs 9,216 B, pool2 10,240 B (peak), conv->16 6,144 B,
    each convolution plus its im2col scratch (Liberis & Lane 2019 [mem]: input + output +
    scratch): here two int16 patches of 3*3*c_in values rounded up to a multiple of 4 (the
    fast kernel's groups of four), 48 B and 288 B."""
    cost = cost_of("32x32gray/c8k3-p2-c16k3", 10)
    live = {(r.name, r.kind): r.live_elements for r in cost.rows}
    scratch = {(r.name, r.kind): r.scratch_bytes for r in cost.rows}
    assert live["1:c8k3", "conv"] == 1_024 + 8_192 == 9_216
    assert live["2:p2", "maxpool"] == 8_192 + 2_048 == 10_240
    assert live["3:c16k3", "conv"] == 2_048 + 4_096 == 6_144
    assert scratch["1:c8k3", "conv"] == 2 * 2 * 12 and scratch["3:c16k3", "conv"] == 2 * 2 * 9 * 8
    assert scratch["2:p2", "maxpool"] == 0
    assert live["1:c8k3", "relu"] == 0  # in place
    assert cost.peak_int8_bytes == 10_240 and cost.peak_op == "2:p2"
    assert cost.peak_float32_bytes == 4 * 10_240


def test_in_place_ops_add_nothing_and_input_counts_once():
    """bn, relu, dropout, flatten add no buffer; the input step counts only its int8 output."""
    cost = cost_of("4x4rgb/bn-x50", 2)
    assert cost.rows[0].live_elements == 48
    assert [r.live_elements for r in cost.rows[1:]] == [0, 0, 0, 48 + 2]  # bn x flatten dense
    assert cost.peak_int8_bytes == 50 and not cost.exportable  # the head's dense: 48 in + 2 out


def test_flash_follows_the_int8_layout():
    """Flash = 256*c input table + 1 B per weight (a convolution's filters padded to a
    multiple of 4 values: 27 -> 28) + 16 B per output channel; bn after conv folds."""
    cost = cost_of("16x16rgb/c8k3-bn-p2-dw3-bn-gap-d10", 4)
    table = 256 * 3
    conv = 28 * 8 + 16 * 8
    dw = 3 * 3 * 8 + 16 * 8
    hidden = 8 * 10 + 16 * 10
    head = 10 * 4 + 16 * 4
    assert cost.flash_bytes == table + conv + dw + hidden + head == 1_664
    assert all(r.flash_bytes == 0 and r.folded for r in cost.rows if r.kind == "bn")
    assert cost.exportable


def test_batch_norm_not_after_a_weighted_layer_is_not_exportable():
    """A bn after pooling is not folded: exportable is False and it costs no flash."""
    cost = cost_of("16x16gray/c8k3-p2-bn", 3)
    bn = next(r for r in cost.rows if r.kind == "bn")
    assert not bn.folded and bn.flash_bytes == 0 and not cost.exportable


def test_totals_of_agrees_with_cost_of():
    """The light totals equal the full cost on varied, seeded random architectures."""
    rng = np.random.default_rng(4)
    tokens = ["c4k3", "c6k1", "dw3", "dw3s2", "c5k3s2", "p2", "a2", "bn", "x20", "c3k3v"]
    checked = 0
    for _ in range(200):
        body = "-".join(rng.choice(tokens, size=rng.integers(0, 6)))
        tail = rng.choice(["", "-gap", "-d7", "-gap-d5-bn"])
        text = f"{rng.choice([8, 13])}x{rng.choice([8, 16])}{rng.choice(['rgb', 'gray'])}" + \
            (f"/{body}{tail}" if body else "")
        try:
            full = cost_of(text, 3)
        except ArchError:
            continue
        light = totals_of(text, 3)
        assert (light.params, light.macs, light.flash_bytes, light.peak_int8_bytes,
                light.exportable) == (full.params, full.macs, full.flash_bytes,
                                      full.peak_int8_bytes, full.exportable), text
        checked += 1
    assert checked > 100


def test_training_memory_counts_what_it_documents():
    """Cached activations, gradient pair, params, grads and Adam's two buffers, by hand."""
    mem = training_memory("4x4gray/c2k3-p2", 3, batch_size=5, optimizer="adam")
    # cached per image: conv input 16, relu output 32, pool input 32, head dense
    # input 8, the 3 probabilities; largest gradient pair: the ReLU's 32 + 32
    assert mem.cached_bytes == (16 + 32 + 32 + 8 + 3) * 5 * 4
    assert mem.gradient_bytes == (32 + 32) * 5 * 4
    params = conv_params(3, 1, 2) + dense_params(8, 3)
    assert mem.params_bytes == mem.grads_bytes == params * 4
    assert mem.optimizer_bytes == 2 * params * 4
    assert mem.total_bytes == (mem.cached_bytes + mem.gradient_bytes + 4 * params * 4)
    sgd = training_memory("4x4gray/c2k3-p2", 3, batch_size=5, optimizer="sgd", momentum=0.0)
    assert sgd.optimizer_bytes == 0


def test_bad_arguments_are_named():
    """Bad class counts, batch sizes and optimisers raise InputError naming the value."""
    with pytest.raises(InputError, match="number of classes must be an integer of at least 2, got 1"):
        cost_of("8x8gray", 1)
    with pytest.raises(ArchError, match="layer 1 'q'"):
        cost_of("8x8gray/q", 2)
    with pytest.raises(InputError, match="batch size must be a positive integer, got 0"):
        training_memory("8x8gray", 2, 0)
    with pytest.raises(InputError, match="optimizer 'rmsprop' is not one of adam, sgd"):
        training_memory("8x8gray", 2, 4, optimizer="rmsprop")


def test_table_rows_sum_to_the_totals():
    """The DataFrame has one row per op plus the input, and its columns sum to the totals."""
    text = "16x16rgb/c8k3-bn-p2-dw3-c8k1-gap-d16-x10"
    cost = cost_of(text, 5)
    table = cost.table()
    assert len(table) == len(expand(parse(text), 5)) + 1
    assert table["params"].sum() == cost.params and table["macs"].sum() == cost.macs
    assert table["flash_bytes"].sum() == cost.flash_bytes
    assert table["live_elements"].max() == cost.peak_elements
    assert (table["live_elements"] + table["scratch_bytes"]).max() == cost.peak_int8_bytes
    assert json.loads(json.dumps(cost.as_dict()))["rows"][0]["name"] == "input"


# ---------------------------------------------------------------- against the engine


ENGINE_TEXTS = [
    "16x16rgb/c8k3-bn-p2-dw3-bn-a2-c16k1-gap-d16-bn-x20",
    "14x12gray/c4k5v-dw3s2-c6k3s2v-d9",
    "8x8ycc/bn-c3k1-d4",
    "8x8hsv",
]


@pytest.mark.parametrize("text", ENGINE_TEXTS)
def test_cost_matches_the_engine_parameter_arrays(text):
    """Per op, the cost model's params and state equal the sizes of the engine's arrays."""
    n_classes = 7
    net = Network.from_arch(text, n_classes)
    cost = cost_of(text, n_classes)
    per_op_params = [0] * len(net.ops)
    per_op_state = [0] * len(net.ops)
    for name, array in net.param_list():   # names are "{index}:{op.name}/{key}"
        per_op_params[int(name.split(":")[0])] += array.size
    for name, array in net.state_list():
        per_op_state[int(name.split(":")[0])] += array.size
    assert [r.params for r in cost.rows[1:]] == per_op_params
    assert [r.state for r in cost.rows[1:]] == per_op_state
    assert cost.params == sum(a.size for _, a in net.param_list())


def test_engine_comparison_covers_every_op_kind():
    """The texts compared with the engine above use all ten op kinds of expand()."""
    kinds = {op.kind for text in ENGINE_TEXTS for op in expand(parse(text), 7)}
    assert kinds == {"conv", "dwconv", "maxpool", "avgpool", "gap", "flatten", "dense",
                     "relu", "bn", "dropout"}


# ---------------------------------------------------------------- the command


def test_command_totals_equal_hand_computed_formulas(capsys):
    """`tinyconv cost 32x32rgb/c8k3-p2-c16k3-p2-gap --classes 8` prints the hand totals."""
    assert main(["cost", "32x32rgb/c8k3-p2-c16k3-p2-gap", "--classes", "8"]) == 0
    out = capsys.readouterr().out
    # c8k3 on 32x32x3 -> p2 -> c16k3 on 16x16x8 -> p2 -> gap (16) -> dense 16->8
    params = conv_params(3, 3, 8) + conv_params(3, 8, 16) + dense_params(16, 8)
    macs = conv_macs(32, 32, 3, 3, 8) + conv_macs(16, 16, 3, 8, 16) + 16 * 8
    # filters of 27 values padded to 28; 16 B a channel
    flash = 256 * 3 + (28 * 8 + 16 * 8) + (3 * 3 * 8 * 16 + 16 * 16) + (16 * 8 + 16 * 8)
    # first conv: input + output + two int16 patches of 3*3*3 values padded to 28
    peak = 32 * 32 * 3 + 32 * 32 * 8 + 2 * 2 * 28
    assert (params, macs, flash, peak) == (1_528, 516_224, 2_784, 11_376)
    lines = {line.split("  ")[0]: line for line in out.splitlines()}
    assert lines["parameters"].split()[-1] == f"{params:,}"
    assert lines["MACs per image"].split()[-1] == f"{macs:,}"
    assert f"{flash:,} B" in lines["flash, int8"]
    assert f"{peak:,} B" in lines["peak activations, int8"]
    assert "head:dense" in out and "2:p2" in out


def test_command_json_and_input_option(capsys):
    """--json prints machine-readable totals; layers alone take --input."""
    assert main(["cost", "c8k3-p2-gap", "--input", "16x16gray", "--classes", "3",
                 "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["arch"] == "16x16gray/c8k3-p2-gap"
    assert data["params"] == conv_params(3, 1, 8) + dense_params(8, 3)
    assert data["macs"] == conv_macs(16, 16, 3, 1, 8) + 8 * 3
    assert data["training_memory"]["batch_size"] == 64
    assert main(["cost", "32x32rgb/c8k3", "--input", "8x8gray", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["arch"] == "8x8gray/c8k3"


def test_command_bad_text_exits_2(capsys):
    """A bad architecture text exits 2 with the error naming the token."""
    assert main(["cost", "32x32rgb/c8k3-p9-p9"]) == 2
    err = capsys.readouterr().err
    assert "error: '32x32rgb/c8k3-p9-p9': layer 3 'p9': pool size 9 is larger than the " \
           "map 3x3" in err
    assert main(["cost", "32x32rgb", "--classes", "1"]) == 2
    assert "--classes '1': must be an integer of at least 2" in capsys.readouterr().err
    assert main(["cost", "c8k3", "--input", "32x32"]) == 2
    assert "input '32x32' is not of the form" in capsys.readouterr().err


def test_peak_is_never_below_any_buffer_pair():
    """Peak = max over buffer-writing ops of in + out (+ a conv's two int16 patches of
    k*k*c_in values rounded up to a multiple of 4, in int8), checked with math on a text."""
    text = "20x20rgb/c10k3s2-a2-dw3-c12k1-p5"
    cost = cost_of(text, 4)
    pairs = [math.prod(op.in_shape) + math.prod(op.out_shape)
             + (4 * -(-op.kernel ** 2 * op.in_shape[2] // 4) * 4 if op.kind == "conv" else 0)
             for op in expand(parse(text), 4)
             if op.kind in ("conv", "dwconv", "maxpool", "avgpool", "gap", "dense")]
    assert cost.peak_int8_bytes == max(pairs + [20 * 20 * 3])
    assert cost.peak_float32_bytes == 4 * max(
        math.prod(op.in_shape) + math.prod(op.out_shape) for op in expand(parse(text), 4)
        if op.kind in ("conv", "dwconv", "maxpool", "avgpool", "gap", "dense"))


def test_cost_command_imports_no_pandas():
    """The cost command prints its table without pandas (it dominated the command's start:
    about 0.2 s of 0.35 s), so a fresh interpreter running it never imports pandas."""
    import subprocess
    import sys
    code = ("import sys; from tinyconv.cli import main; "
            "main(['cost', '16x16gray/c8k3-p2-gap', '--core', 'cortex-m4']); "
            "sys.stderr.write(str('pandas' in sys.modules))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True)
    assert done.stderr.strip().endswith("False")
    assert "instructions on cortex-m4" in done.stdout
