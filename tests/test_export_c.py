"""The generated C: compiles strictly, matches the integer reference bit for bit, sizes."""

import re
import shutil
import subprocess

import numpy as np
import pytest

from helpers import randomise_biases_and_norms
from tinyconv.cost import cost_of
from tinyconv.errors import InputError
from tinyconv.export.c_writer import check_prefix, generate_c
from tinyconv.network import Network
from tinyconv.quant import quantize_network
from tinyconv.quant.integer import int8_outputs

pytestmark = pytest.mark.skipif(shutil.which("gcc") is None, reason="needs gcc")

GCC = ["gcc", "-std=c99", "-pedantic", "-Wall", "-Wextra", "-Werror", "-O2"]
# the generated unit alone must also pass the checks embedded builds often add
STRICT = GCC + ["-Wconversion", "-Wsign-conversion", "-Wshadow", "-Wcast-qual"]

# Each architecture exercises a part of the writer; together: standard and
# depthwise convolution, stride 2, valid padding, both pooling kinds, global
# average pooling, hidden dense layers, batch norm folded, dropout skipped.
ARCHS = [
    ("16x16rgb/c8k3-bn-p2-dw3s2-bn-c8k1-a2-gap-d16-bn", 5),
    ("12x12gray/c4k4v-p2-d8-x20-d6", 3),
    ("20x20rgb/c6k5s2v-dw5-a2-c4k3s2", 4),
    ("9x9hsv/dw3-bn-p3-d5", 2),
    ("8x8gray", 10),
]

HARNESS = r"""
#include <stdio.h>
#include "@P@.c"

/* Reads images from stdin; writes per image the logits then the class (int32). */
int main(int argc, char **argv)
{
    static uint8_t image[@U@_INPUT_BYTES];
    int8_t logits[@U@_CLASSES];
    (void)argv;
    if (argc > 1) { /* sizes of the arrays and of the activation buffer */
        @SIZES@
        printf("buffer %lu\n", (unsigned long)sizeof(@P@_activations));
        return 0;
    }
    while (fread(image, 1, sizeof image, stdin) == sizeof image) {
        int32_t best = @P@_classify(image, logits);
        fwrite(logits, 1, sizeof logits, stdout);
        fwrite(&best, sizeof best, 1, stdout);
    }
    return 0;
}
"""


def random_setup(text: str, n_classes: int, seed: int):
    """A random-weight network (random biases and batch norms), normalisation, images."""
    rng = np.random.default_rng(seed)
    net = randomise_biases_and_norms(Network.from_arch(text, n_classes, seed=seed), rng,
                                     shift_sd=0.3, var_range=(0.3, 2.0), bias_sd=0.1)
    h, w, c = net.arch.input.shape
    mean, std = rng.uniform(0.3, 0.6, c), rng.uniform(0.15, 0.3, c)
    # smooth-ish images (a random gradient plus noise) rather than pure noise
    base = rng.uniform(0, 255, (300, 1, 1, c)) + rng.normal(0, 40, (300, h, w, c))
    images = np.clip(base, 0, 255).astype(np.uint8)
    return net, mean, std, images


def build(tmp_path, code, flags=()) -> tuple:
    """Write and compile the generated files plus a harness; returns (run, sizes)."""
    p, u = code.prefix, code.prefix.upper()
    (tmp_path / f"{p}.c").write_text(code.source)
    (tmp_path / f"{p}.h").write_text(code.header)
    # the generated unit alone, with every warning an error
    subprocess.run(STRICT + ["-c", f"{p}.c", "-o", f"{p}.o"], cwd=tmp_path, check=True)
    sizes = "\n        ".join(f'printf("{a.name} %lu\\n", (unsigned long)sizeof({a.name}));'
                               for a in code.arrays)
    harness = HARNESS.replace("@SIZES@", sizes).replace("@P@", p).replace("@U@", u)
    (tmp_path / "harness.c").write_text(harness)
    subprocess.run(GCC + list(flags) + ["harness.c", "-o", "harness"], cwd=tmp_path,
                   check=True)
    out = subprocess.run(["./harness", "sizes"], cwd=tmp_path, check=True,
                         capture_output=True, text=True).stdout
    sizes = {name: int(v) for name, v in (line.split() for line in out.splitlines())}

    def run(images: np.ndarray, k: int) -> tuple[np.ndarray, np.ndarray]:
        res = subprocess.run(["./harness"], cwd=tmp_path, input=images.tobytes(),
                             capture_output=True, check=True)
        raw = np.frombuffer(res.stdout, np.uint8).reshape(images.shape[0], k + 4)
        return raw[:, :k].view(np.int8), raw[:, k:].copy().view(np.int32)[:, 0]

    return run, sizes


@pytest.mark.parametrize("text, k", ARCHS)
def test_c_matches_integer_reference(tmp_path, text, k):
    """C logits and class equal the NumPy integer inference bit for bit on 300 images."""
    net, mean, std, images = random_setup(text, k, seed=len(text))
    qnet = quantize_network(net, mean, std, images[:64])
    code = generate_c(qnet, "tcx")
    run, sizes = build(tmp_path, code)
    logits, best = run(images, k)
    want, classes = int8_outputs(qnet, images)
    np.testing.assert_array_equal(logits, want)
    np.testing.assert_array_equal(best, classes)
    # the class is an arg-max of the int8 logits too, up to ties at int8
    assert (want[np.arange(len(best)), best] == want.max(axis=1)).all()

    # sizes: the activation buffer is the cost model's int8 peak; flash is the sum of sizeof
    cost = cost_of(text, k)
    assert sizes.pop("buffer") == cost.peak_int8_bytes == code.activation_bytes
    assert sum(sizes.values()) == cost.flash_bytes == code.flash_bytes
    assert f"#define TCX_ACTIVATION_BYTES {cost.peak_int8_bytes}\n" in code.header
    assert f"#define TCX_FLASH_BYTES {cost.flash_bytes}\n" in code.header


def _code_without_comments(text: str) -> str:
    return re.sub(r"/\*.*?\*/", "", text, flags=re.S)


def test_c_has_no_floats_no_malloc_and_only_two_headers():
    """The integer path has no float or double, no allocation, only stdint.h/string.h
    (and the Arm C Language Extensions' arm_acle.h on the DSP path)."""
    net, mean, std, images = random_setup(ARCHS[0][0], ARCHS[0][1], seed=1)
    code = generate_c(quantize_network(net, mean, std, images[:32]), "tc",
                      classes=[f"c{i}" for i in range(5)], macs=123)
    for text in (code.source, code.header):
        body = _code_without_comments(text)
        assert not re.search(r"\b(float|double|malloc|calloc|free|printf)\b", body)
        includes = re.findall(r"#include\s*([<\"][^>\"]+[>\"])", body)
        assert set(includes) <= {"<stdint.h>", "<string.h>", '"tc.h"', "<arm_acle.h>"}
    # arm_acle.h only where the DSP path is switched on
    guarded = re.search(r"#if TC_USE_DSP\n#include <arm_acle.h>\n", code.source)
    assert guarded and code.source.count("arm_acle.h") == 1
    # header comment: architecture, classes and sizes
    assert ARCHS[0][0] in code.header and "4 c4" in code.header
    assert f"flash (constant arrays): {code.flash_bytes} bytes" in code.header
    assert "multiply-accumulates per image: 123" in code.header
    # every global symbol carries the prefix
    names = re.findall(r"^(?:static )?(?:const )?\w+ \*?(\w+)\(|^static (?:const )?\w+ (\w+)\[",
                       _code_without_comments(code.source), flags=re.M)
    assert names and all(n.startswith("tc_") for pair in names for n in pair if n)


def test_class_names_cannot_break_the_comment():
    """A class name holding '*/' or a newline stays inside the header comment."""
    net, mean, std, images = random_setup("8x8gray", 2, seed=0)
    code = generate_c(quantize_network(net, mean, std, images[:8]), "tc",
                      classes=["a */ int x;", "b\nc"])
    assert "int x;" not in _code_without_comments(code.header)
    assert "b?c" in code.header


@pytest.mark.parametrize("bad", ["1abc", "tc-x", "int", "", "_tc", "a" * 21, "tc x"])
def test_prefix_must_be_a_c_identifier(bad):
    """A prefix that is not a short C identifier is refused with the rule and an example."""
    with pytest.raises(InputError, match=r"is not a usable C identifier.*e\.g\. 'tiles'"):
        check_prefix(bad)
    assert check_prefix("tiles_v2") == "tiles_v2"


def test_wrong_number_of_class_names():
    """Class names must be one per logit."""
    net, mean, std, images = random_setup("8x8gray", 3, seed=0)
    with pytest.raises(InputError, match="2 class names given for a network of 3 classes"):
        generate_c(quantize_network(net, mean, std, images[:8]), "tc", classes=["a", "b"])


def _sanitizers_work(tmp_path) -> bool:
    probe = tmp_path / "probe.c"
    probe.write_text("int main(void) { return 0; }\n")
    done = subprocess.run(["gcc", "-fsanitize=address,undefined", str(probe), "-o",
                           str(tmp_path / "probe")], capture_output=True)
    return done.returncode == 0


@pytest.mark.slow
@pytest.mark.parametrize("style", ["fast", "plain"])
@pytest.mark.parametrize("text, k", ARCHS[:4])
def test_c_is_clean_under_address_and_undefined_behaviour_sanitizers(tmp_path, text, k, style):
    """Both kernel styles, built with -fsanitize=address,undefined (GCC), run clean and
    equal the integer reference: no out-of-bounds access, no signed overflow."""
    if not _sanitizers_work(tmp_path):
        pytest.skip("this gcc cannot build with -fsanitize=address,undefined")
    net, mean, std, images = random_setup(text, k, seed=len(text) + 1)
    qnet = quantize_network(net, mean, std, images[:64])
    code = generate_c(qnet, "tcs", style=style)
    flags = ("-fsanitize=address,undefined", "-fno-sanitize-recover=all", "-g")
    run, _ = build(tmp_path, code, flags)
    logits, best = run(images[:80], k)
    want, classes = int8_outputs(qnet, images[:80])
    np.testing.assert_array_equal(logits, want)
    np.testing.assert_array_equal(best, classes)


@pytest.mark.parametrize("text, k", ARCHS[:3])
def test_plain_kernels_match_too(tmp_path, text, k):
    """The plain loop nests (kept as the readable reference style) equal the reference."""
    net, mean, std, images = random_setup(text, k, seed=len(text))
    qnet = quantize_network(net, mean, std, images[:64])
    code = generate_c(qnet, "tcp", style="plain")
    run, _ = build(tmp_path, code)
    logits, best = run(images, k)
    want, classes = int8_outputs(qnet, images)
    np.testing.assert_array_equal(logits, want)
    np.testing.assert_array_equal(best, classes)
    with pytest.raises(InputError, match="kernel style 'quick' is not one of fast, plain"):
        generate_c(qnet, "tcp", style="quick")


def _altered(qnet, lo=None, shifts=()):
    """``qnet`` with ReLU layers' lower clamp set to ``lo`` and the first channels of every
    weighted layer given the per-channel ``shifts``."""
    from dataclasses import replace
    layers = []
    for layer in qnet.layers:
        if layer.kind in ("conv", "dwconv", "dense"):
            shift = np.array(layer.shift, copy=True)
            n = min(len(shift), len(shifts))
            shift[:n] = shifts[:n]
            layer = replace(layer, shift=shift,
                            lo=lo if (lo is not None and layer.relu) else layer.lo)
        layers.append(layer)
    return replace(qnet, layers=tuple(layers))


@pytest.mark.parametrize("style", ["fast", "plain"])
@pytest.mark.parametrize("lo, shifts", [(-100, ()), (None, (0, 1, 24, 31, -1))],
                         ids=["raised-lower-clamp", "rare-shifts"])
def test_less_common_requantisations_match_the_reference(tmp_path, style, lo, shifts):
    """The kernels' less common paths give the integer reference's outputs bit for bit: a
    lower clamp above -128 (a ReLU whose output zero point is above -128), and
    per-channel shifts outside the one-product form's 2..23 (0, 1, 24, 31 and a left
    shift), which take the general form."""
    text, k = "16x16rgb/c8k3-p2-dw3-c12k1-c6k3s2-gap-d16-d5", 5
    net, mean, std, images = random_setup(text, k, seed=7)
    base = quantize_network(net, mean, std, images[:64])
    qnet = _altered(base, lo, shifts)
    want, classes = int8_outputs(qnet, images[:120])
    # the alteration changes the reference's outputs, so a kernel ignoring it would fail
    assert (want != int8_outputs(base, images[:120])[0]).any()
    run, _ = build(tmp_path, generate_c(qnet, "tcr", style=style))
    logits, best = run(images[:120], k)
    np.testing.assert_array_equal(logits, want)
    np.testing.assert_array_equal(best, classes)


@pytest.mark.skipif(shutil.which("arm-none-eabi-gcc") is None,
                    reason="needs Debian's gcc-arm-none-eabi (.ci/run installs it)")
@pytest.mark.parametrize("cpu", ["cortex-m0", "cortex-m3", "cortex-m4", "cortex-m7",
                                 "cortex-m33"])
def test_c_builds_without_warnings_for_every_core_and_path(tmp_path, cpu):
    """The generated C (every fast kernel: conv, 1x1, depthwise, both poolings, residual
    addition, dense, head) compiles with arm-none-eabi-gcc under -std=c99 -pedantic and
    every conversion warning as an error, for cores without and with the saturation
    and DSP instructions, on the portable and the DSP path (the real cross-compiler)."""
    text, k = "16x16rgb/c8k3-[c16k1-dw3-c8k1]-p2-a2-[c8k3-c8k3]-gap-d12", 5
    net, mean, std, images = random_setup(text, k, seed=3)
    code = generate_c(quantize_network(net, mean, std, images[:32]), "tca")
    (tmp_path / "tca.c").write_text(code.source)
    (tmp_path / "tca.h").write_text(code.header)
    for path in ("-DTCA_USE_DSP=0", "-DTCA_USE_DSP=1" if cpu not in ("cortex-m0", "cortex-m3")
                 else "-DTCA_USE_DSP=0"):
        subprocess.run(["arm-none-eabi-gcc", f"-mcpu={cpu}", "-mthumb", *STRICT[1:], path,
                        "-c", "tca.c", "-o", "tca.o"], cwd=tmp_path, check=True)
