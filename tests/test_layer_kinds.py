"""A layer kind added through the one table of each stage: cost, engine and export.

The toy kind ``absval`` (``y = |x|``, elementwise) is defined here and
registered only for these tests, through exactly the entries DEVELOPERS.md
lists under "Where a change goes": ``layers.BUILDERS``, ``cost_rules.OP_RULES``,
``quant.kinds.STEP_KINDS`` and ``export.c_steps.EMITTERS``. ``monkeypatch``
removes every entry when a test ends.
"""

from __future__ import annotations

import shutil
import subprocess
from dataclasses import replace

import numpy as np
import pytest

from tinyconv.arch import expand, parse
from tinyconv.cost import OpRule, op_cost
from tinyconv.cost_rules import OP_RULES
from tinyconv.export import c_steps
from tinyconv.export.c_writer import generate_c
from tinyconv.gradients import check_layer
from tinyconv.layers import BUILDERS, build
from tinyconv.layers.base import Layer
from tinyconv.liveness import live_ranges
from tinyconv.quant import kinds as quant_kinds
from tinyconv.quant.fold import STEP, build_steps
from tinyconv.quant.floatref import run_steps
from tinyconv.quant.integer import int8_outputs
from tinyconv.quant.calibrate import QMAX, QMIN
from tinyconv.quant.quantize import QuantLayer, quantize_steps, same_grid_step

KIND = "absval"


# ------------------------------------------------------------- the toy kind's module

class AbsVal(Layer):
    """``y = |x|``; the gradient is ``g sign(x)``."""

    def forward(self, x: np.ndarray, training: bool = False) -> np.ndarray:
        self._sign = np.sign(x)
        return np.abs(x)

    def backward(self, grad_out: np.ndarray) -> np.ndarray:
        return grad_out * self._sign


def absval_float(step, x, skip=None):
    """The float64 step."""
    return np.abs(x)


def absval_int(layer: QuantLayer, x, skip=None):
    """The integer step, on the input's grid: ``Z + |q - Z|``, clamped to int8."""
    y = layer.in_zp + np.abs(x.astype(np.int32) - layer.in_zp)
    return np.clip(y, QMIN, QMAX).astype(np.int8)


KERNEL = r"""
/* |x| on the input's grid: zp + |x - zp|, clamped to int8. */
@U@_KERNEL void @P@_absval(const int8_t *x, int8_t *y, int32_t n, int32_t zp)
{
    int32_t i;
    for (i = 0; i < n; ++i) {
        int32_t d = (int32_t)x[i] - zp;
        int32_t v = zp + (d < 0 ? -d : d);
        y[i] = (int8_t)(v > 127 ? 127 : v);
    }
}
"""


def absval_call(layer, p, src, dst, scratch, style, skip):
    """The kernel call of one step."""
    n = int(np.prod(layer.op.out_shape))
    return f"    {p}_absval({src}, {dst}, {n}, {layer.in_zp});\n"


def absval_kernels(style, prefix):
    """The same kernel in both styles."""
    return KERNEL.replace("@P@", prefix).replace("@U@", prefix.upper())


@pytest.fixture
def absval(monkeypatch):
    """The toy kind, registered in each stage's table for one test only."""
    monkeypatch.setitem(BUILDERS, KIND, lambda op, rng, dtype: AbsVal())
    monkeypatch.setitem(OP_RULES, KIND, OpRule(lambda op: (0, 0, 0, 0), buffer=True,
                                               cached=lambda op: int(np.prod(op.in_shape))))
    monkeypatch.setitem(quant_kinds.STEP_KINDS, KIND,
                        quant_kinds.StepKind(STEP, absval_float, same_grid_step, absval_int))
    monkeypatch.setitem(c_steps.EMITTERS, KIND, c_steps.CEmitter(absval_call, absval_kernels))
    return KIND


def _ops(text: str = "8x8rgb/c6k3-p2-c4k1", k: int = 3):
    """``expand`` of ``text`` with an absval op first, on the normalised input (which has
    negative values, unlike the output of a ReLU)."""
    ops = expand(parse(text), k)
    toy = replace(ops[0], kind=KIND, out_shape=ops[0].in_shape, position=1, token=KIND,
                  filters=0, kernel=0, pads=(0, 0, 0, 0))
    return (toy,) + ops, 0


# ------------------------------------------------------------------------ the tests

def test_unregistered_kind_is_refused_by_every_stage():
    """Without its entries the kind is unknown to the engine, the cost and the int8 stage."""
    op = replace(expand(parse("8x8rgb/p2"), 3)[0], kind=KIND)
    with pytest.raises(ValueError, match=r"unknown kind 'absval'; expected one of conv"):
        build(op, np.random.default_rng(0))
    with pytest.raises(ValueError, match=r"op kind 'absval' has no cost rule.*OP_RULES"):
        op_cost(op, 0)
    with pytest.raises(ValueError, match=r"unknown kind 'absval': it has no int8 form"):
        quant_kinds.step_kind(KIND)
    with pytest.raises(ValueError, match=r"step kind 'absval' has no C emitter.*EMITTERS"):
        c_steps.emitter_of(KIND)


def test_cost_of_registered_kind(absval):
    """Its cost rule gives 0 parameters and MACs, and, as a buffer step, input + output
    alive together."""
    ops, at = _ops()
    lives = live_ranges(ops, (8, 8, 3))
    row = op_cost(ops[at], at, lives=lives)
    n = int(np.prod(ops[at].out_shape))
    assert (row.params, row.state, row.macs, row.flash_bytes) == (0, 0, 0, 0)
    assert row.out_elements == n and row.live_elements == 2 * n  # the input and |input|
    assert row.alive == ("input", ops[at].name)


def test_engine_gradients_of_registered_kind(absval):
    """build() makes the layer from the table; forward is |x| and backward matches
    central finite differences (tinyconv.gradients)."""
    ops, at = _ops()
    layer = build(ops[at], np.random.default_rng(0), np.float64)
    rng = np.random.default_rng(1)
    # away from the kink at 0, so that no finite-difference step crosses it
    x = rng.choice([-1.0, 1.0], (2, 8, 8, 3)) * rng.uniform(0.1, 1.0, (2, 8, 8, 3))
    np.testing.assert_array_equal(layer.forward(x, training=True), np.abs(x))
    rows = check_layer(layer, x, seed=2)
    assert rows and all(r.passed for r in rows), rows  # finite differences


def _network(ops, seed: int = 0):
    """Folded steps and a quantised network of ``ops`` with random weights, and images."""
    rng = np.random.default_rng(seed)
    layers = [build(op, rng, np.float64) for op in ops]
    for layer in layers:
        if "b" in layer.params:
            layer.params["b"][...] = rng.normal(0.0, 0.2, layer.params["b"].shape)
    params = [{**layer.params, **layer.state} for layer in layers]
    steps = build_steps(ops, params, [None] * len(ops))
    base = rng.uniform(0, 255, (80, 1, 1, 3)) + rng.normal(0, 40, (80, 8, 8, 3))
    images = np.clip(base, 0, 255).astype(np.uint8)
    qnet = quantize_steps(steps, "toy", 3, (8, 8, 3), np.full(3, 0.5), np.full(3, 0.25),
                          images[:48])
    return layers, steps, qnet, images


def test_int8_form_of_registered_kind(absval):
    """The fold makes it a step of its own; the float64 reference agrees with the engine's
    layers; the integer step keeps its input's grid."""
    ops, at = _ops()
    layers, steps, qnet, images = _network(ops)
    assert [s.kind for s in steps] == [KIND, "conv", "maxpool", "conv", "dense"]
    x = (images[:4].astype(np.float64) / 255.0 - 0.5) / 0.25
    y = x
    for layer in layers:
        y = layer.forward(y, training=False)
    np.testing.assert_allclose(run_steps(steps, x), y, rtol=1e-10, atol=1e-10)
    toy = qnet.layers[0]
    assert toy.kind == KIND and (toy.in_scale, toy.in_zp) == (toy.out_scale, toy.out_zp)
    # the step is no identity here: the normalised input has values below real 0
    assert (x < 0).any() and toy.in_zp > QMIN


@pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc (Debian package gcc)")
@pytest.mark.parametrize("style", ["fast", "plain"])
def test_c_of_registered_kind_matches_integer_reference(absval, tmp_path, style):
    """The C holds the kind's own kernel; compiled by the host gcc, its logits and classes
    equal the NumPy integer reference bit for bit."""
    ops, _ = _ops()
    _, _, qnet, images = _network(ops, seed=3)
    code = generate_c(qnet, "toy", style=style)
    assert code.source.count("void toy_absval(") == 1 and "toy_absval(toy_activations" in code.source
    (tmp_path / "toy.c").write_text(code.source)
    (tmp_path / "toy.h").write_text(code.header)
    (tmp_path / "main.c").write_text(MAIN)
    subprocess.run(["gcc", "-std=c99", "-pedantic", "-Wall", "-Wextra", "-Werror", "-O2",
                    "main.c", "toy.c", "-o", "toy"], cwd=tmp_path, check=True)
    res = subprocess.run(["./toy"], cwd=tmp_path, input=images.tobytes(), capture_output=True,
                         check=True)
    raw = np.frombuffer(res.stdout, np.uint8).reshape(images.shape[0], 3 + 4)
    logits, classes = int8_outputs(qnet, images)
    np.testing.assert_array_equal(raw[:, :3].view(np.int8), logits)  # gcc against NumPy
    np.testing.assert_array_equal(raw[:, 3:].copy().view(np.int32)[:, 0], classes)


MAIN = r"""
#include <stdio.h>
#include "toy.h"

/* Reads images from stdin; writes per image the logits, then the class (int32). */
int main(void)
{
    static uint8_t image[TOY_INPUT_BYTES];
    int8_t logits[TOY_CLASSES];
    while (fread(image, 1, sizeof image, stdin) == sizeof image) {
        int32_t best = toy_classify(image, logits);
        fwrite(logits, 1, sizeof logits, stdout);
        fwrite(&best, sizeof best, 1, stdout);
    }
    return 0;
}
"""
