"""The int8 C on emulated Cortex-M cores: bit-exact, measured, and the model beside it.

Outside references: the Arm GNU cross-compiler (Debian ``gcc-arm-none-eabi``)
builds the code and QEMU (``qemu-system-arm``, MPS2 boards) runs it; with
``-icount shift=0`` QEMU advances virtual time one nanosecond per instruction
(QEMU documentation), which the tick calibration test checks with a loop of
known length.
"""

import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from test_export_blocks import BLOCK_NETS
from tinyconv.cli import main
from tinyconv.cost import cost_of
from tinyconv.device import harness
from tinyconv.device.build import build_elf, run_elf
from tinyconv.device.cores import CORES, core_named, milliseconds
from tinyconv.device.measure import measure, random_network
from tinyconv.device.model import estimate
from tinyconv.device.refit import FIT_NETWORKS
from tinyconv.device.toolchain import TOOLS, find_toolchain
from tinyconv.errors import InputError
from tinyconv.quant.integer import int8_outputs

HAVE_TOOLS = all(shutil.which(tool) for tool in TOOLS)
needs_device = pytest.mark.skipif(
    not HAVE_TOOLS, reason="needs Debian's gcc-arm-none-eabi, libnewlib-arm-none-eabi and "
    "qemu-system-arm (.ci/run installs them)")

# Together: standard, depthwise and 1x1 convolution, stride 2, valid padding, both
# poolings, global average pooling, hidden dense layers, batch norm folded, dropout.
BIT_EXACT = [
    ("16x16rgb/c8k3-bn-p2-dw3s2-bn-c8k1-a2-gap-d16-bn", 5),
    ("12x12gray/c4k4v-p2-d8-x20-d6", 3),
    ("20x20rgb/c6k5s2v-dw5-a2-c4k3s2", 4),
    ("9x9hsv/dw3-bn-p3-d5", 2),
    ("24x24ycc/c12k3-p2-dw3-c16k1-bn-p2-gap", 7),
]
# Not among the networks the model was fitted on (checked below).
HELD_OUT = [
    ("32x32rgb/c12k3-p2-dw3-c24k1-p2-gap", 10),
    ("16x16gray/c8k3-p2-c16k3-p2-d32", 8),
    ("28x28rgb/c12k3s2-dw3-c24k1-a2-gap", 5),
    ("12x12gray/c6k5v-p2-d12", 4),
    ("24x24hsv/dw5-c8k1-p2-c16k3-p3-gap-d8", 3),
    ("20x20gray/c16k3-bn-p2-c16k3-bn-a2-gap", 6),
    ("8x8rgb/c4k1-d6", 2),
    ("24x24rgb/c12k3-p2-[c36k1-dw3-c12k1]-p2-gap", 6),
    ("16x16ycc+hsv/c8k3s2-[c8k3-c8k3]-a2-d12", 4),
]


@needs_device
@pytest.mark.slow
@pytest.mark.parametrize("core", ["cortex-m3", "cortex-m4", "cortex-m7", "cortex-m33"])
@pytest.mark.parametrize("text, k", BIT_EXACT)
def test_emulated_logits_equal_the_integer_reference(text, k, core):
    """Every logit and class from the emulated core equals the NumPy integer reference."""
    qnet, images = random_network(text, k, seed=len(text))
    m = measure(qnet, images[:6], core_named(core), steps=False)
    assert m.bit_exact and m.mismatched_images == 0
    # the constant arrays in the ELF are the cost model's flash, byte for byte, and the
    # static buffer its int8 peak
    cost = cost_of(text, k)
    assert m.flash_data_bytes == cost.flash_bytes
    assert m.ram_static_bytes == cost.peak_int8_bytes
    assert m.stack_bytes > 0


@needs_device
@pytest.mark.slow
@pytest.mark.parametrize("core", ["cortex-m3", "cortex-m4"])
@pytest.mark.parametrize("text, k", BLOCK_NETS)
def test_emulated_blocks_equal_the_integer_reference(text, k, core):
    """Networks with residual blocks: every logit and class from the emulated core equals
    the integer reference, and the static buffer is the cost model's live-range peak."""
    qnet, images = random_network(text, k, seed=len(text))
    m = measure(qnet, images[:4], core_named(core), steps=False)
    assert m.bit_exact and m.mismatched_images == 0
    cost = cost_of(text, k)
    assert m.ram_static_bytes == cost.peak_int8_bytes
    assert m.flash_data_bytes == cost.flash_bytes


@needs_device
@pytest.mark.slow
@pytest.mark.parametrize("opt", ["-O0", "-O2", "-Os"])
@pytest.mark.parametrize("dsp", ["1", "0"])
def test_dsp_and_portable_paths_bit_exact_at_every_optimisation_level(opt, dsp):
    """On a Cortex-M4 the DSP path and the portable C, at -O0, -O2 and -Os, equal the
    integer reference (and so each other)."""
    for text, k in (BIT_EXACT[0], ("12x12rgb/c7k3-c5k1-dw3s2-d9", 3), BLOCK_NETS[1]):
        qnet, images = random_network(text, k, seed=11)
        m = measure(qnet, images[:3], CORES["cortex-m4"], opt=opt, steps=False,
                    extra_flags=(f"-DTC_USE_DSP={dsp}",))
        assert m.bit_exact, (text, opt, dsp)


@needs_device
def test_the_dsp_path_is_on_by_default_where_the_core_has_it(tmp_path):
    """TC_USE_DSP follows the compiler's __ARM_FEATURE_DSP: on for M4, off for M3."""
    from tinyconv.export.c_writer import generate_c

    qnet, _ = random_network("8x8gray/c4k3-gap", 3, seed=1)
    (tmp_path / "tc.h").write_text(generate_c(qnet, "tc").header)
    (tmp_path / "probe.c").write_text('#include "tc.h"\nint dsp = TC_USE_DSP;\n')
    tools = find_toolchain()
    for core, want in (("cortex-m3", "0"), ("cortex-m4", "1"), ("cortex-m33", "1")):
        out = subprocess.run([tools.gcc, *CORES[core].gcc_flags, "-E", "probe.c"],
                             cwd=tmp_path, capture_output=True, text=True, check=True).stdout
        assert f"int dsp = {want};" in out, core


@needs_device
def test_a_wrong_logit_is_caught(tmp_path):
    """The comparison is real: a reference from other weights does not match the device."""
    qnet, images = random_network("8x8gray/c4k3-gap", 3, seed=1)
    other, _ = random_network("8x8gray/c4k3-gap", 3, seed=2)
    tools = find_toolchain()
    from tinyconv.export.c_writer import generate_c
    elf = build_elf(tools, generate_c(qnet, "tc"), images[:4], 4, CORES["cortex-m4"], tmp_path)
    out = run_elf(tools, elf, CORES["cortex-m4"], 4, 3)
    want, _ = int8_outputs(qnet, images[:4])
    np.testing.assert_array_equal(out.logits, want)
    assert not np.array_equal(out.logits, int8_outputs(other, images[:4])[0])


@needs_device
@pytest.mark.slow
@pytest.mark.parametrize("core", ["cortex-m4", "cortex-m33"])
def test_model_within_15_percent_on_networks_it_was_not_fitted_on(core):
    """Instructions within 15 %, flash within 10 %, and RAM never above the estimate."""
    fitted = {text for text, _ in FIT_NETWORKS}
    for text, k in HELD_OUT:
        assert text not in fitted
        qnet, images = random_network(text, k, seed=3)
        m = measure(qnet, images[:2], core_named(core), steps=False)
        est = estimate(text, k, core)
        assert abs(est.instructions - m.instructions) <= 0.15 * m.instructions, text
        assert abs(est.flash_bytes - m.flash_bytes) <= 0.10 * m.flash_bytes, text
        assert m.ram_bytes <= est.ram_bytes, text


@needs_device
def test_two_runs_give_identical_counts():
    """Instruction counts, flash, RAM and per-step figures repeat exactly."""
    qnet, images = random_network("16x16gray/c8k3-p2-dw3-c8k1-gap", 4, seed=5)
    runs = [measure(qnet, images[:3], CORES["cortex-m4"]) for _ in range(2)]
    assert runs[0] == runs[1]
    assert sum(s.instructions for s in runs[0].steps) == pytest.approx(
        runs[0].instructions, rel=0.01)


LOOP_MAIN = r"""
#include <stdint.h>
#include "board.h"
static char line[32];
int main(void)
{
    uint64_t a, b, d;
    char *p = line + 30;
    board_ticks_start();
    a = board_ticks();
    /* two instructions an iteration: subtract and branch */
    __asm__ volatile ("mov r2, %0\n1: subs r2, r2, #1\n bne 1b" :: "r"(@N@) : "r2", "cc");
    b = board_ticks();
    d = b - a;
    *p = 0; *--p = '\n';
    do { *--p = (char)('0' + d % 10u); d /= 10u; } while (d);
    *--p = ' '; *--p = 'T';
    board_put(p);
    board_put("S 0\nE\n");
    return 0;
}
"""


@needs_device
@pytest.mark.parametrize("core", ["cortex-m3", "cortex-m33"])
def test_one_tick_is_the_stated_number_of_instructions(tmp_path, core):
    """A loop of 2 x 2**20 instructions takes that many ticks x tick_instructions (+- 1 tick)."""
    c = CORES[core]
    tools = find_toolchain()
    n = 2 ** 20
    (tmp_path / "board.h").write_text(harness.BOARD_H)
    (tmp_path / "board.c").write_text(harness.board_c())
    (tmp_path / "board.ld").write_text(harness.linker_script(c))
    (tmp_path / "main.c").write_text(LOOP_MAIN.replace("@N@", str(n)))
    subprocess.run([tools.gcc, *c.gcc_flags, "-O2", "-nostartfiles", "-T", "board.ld",
                    "main.c", "board.c", "-o", "loop.elf", "-lc", "-lgcc"], cwd=tmp_path,
                   check=True)
    subprocess.run([tools.qemu, "-M", c.board, "-nographic", "-monitor", "none", "-serial",
                    "none", "-icount", "shift=0", "-chardev", "file,id=o,path=out.txt",
                    "-semihosting-config", "enable=on,target=native,chardev=o", "-kernel",
                    "loop.elf"], cwd=tmp_path, check=True, timeout=60)
    ticks = int((tmp_path / "out.txt").read_text().split()[1])
    assert abs(ticks * c.tick_instructions - 2 * n) <= 2 * c.tick_instructions


def test_time_is_instructions_times_cpi_over_clock():
    """ms = instructions x cycles per instruction / (MHz x 1000) (worked example, computed)."""
    core = CORES["cortex-m4"]
    # 8,000,000 instructions x 1.3 / 80 MHz = 130 ms
    assert milliseconds(8_000_000, core, 80.0) == pytest.approx(130.0)
    assert milliseconds(8_000_000, core) == pytest.approx(8e6 * core.cpi / (core.clock_mhz * 1e3))


def test_core_names():
    """Short and long core names work; an unknown one lists the supported cores."""
    assert core_named("M4") is CORES["cortex-m4"]
    assert core_named("cortex-m33") is CORES["cortex-m33"]
    with pytest.raises(InputError, match="core 'm0' is not supported; use one of cortex-m3"):
        core_named("m0")


def test_estimate_counts_code_and_arrays():
    """The flash estimate is the exact constant arrays plus a positive code size."""
    est = estimate("32x32gray/c16k3-p2-c32k3-p2-gap", 8, "cortex-m4")
    cost = cost_of("32x32gray/c16k3-p2-c32k3-p2-gap", 8)
    assert est.flash_data_bytes == cost.flash_bytes
    assert 500 < est.flash_code_bytes < 8000
    assert est.flash_bytes == est.flash_data_bytes + est.flash_code_bytes
    assert est.ram_bytes == cost.peak_int8_bytes + est.stack_bytes
    # more work costs more time: the same network with twice the filters
    assert estimate("32x32gray/c32k3-p2-c32k3-p2-gap", 8, "cortex-m4").instructions > \
        est.instructions


def test_missing_tools_are_a_clear_error(monkeypatch, tmp_path, capsys):
    """Without the cross-compiler and QEMU: exit 2, the Debian packages named, no traceback."""
    monkeypatch.setenv("PATH", str(tmp_path))
    assert main(["emulate", "8x8gray/c4k3-gap", "--core", "cortex-m4"]) == 2
    err = capsys.readouterr().err
    assert "apt-get install -y gcc-arm-none-eabi libnewlib-arm-none-eabi qemu-system-arm" in err
    assert "Traceback" not in err


def test_emulate_needs_one_network(capsys):
    """Neither or both of ARCH and --network: exit 2 with an example."""
    assert main(["emulate"]) == 2
    assert "give an architecture text or --network" in capsys.readouterr().err


@needs_device
def test_emulate_json(capsys):
    """--json prints one object with the measured figures and the estimate, per core."""
    assert main(["emulate", "12x12gray/c4k3-p2-d8", "--classes", "3", "--core", "m3",
                 "--images", "2", "--clock-mhz", "48", "--json"]) == 0
    rec = json.loads(capsys.readouterr().out)
    for key in ("instructions", "instructions_per_mac", "ms_at_clock", "flash_bytes",
                "ram_bytes", "bit_exact", "estimate", "cpi"):
        assert key in rec
    assert set(rec["estimate"]) >= {"instructions", "flash_bytes", "ram_bytes"}
    assert rec["bit_exact"] is True and rec["core"] == "cortex-m3" and rec["clock_mhz"] == 48
    assert rec["ms_at_clock"] == pytest.approx(rec["instructions"] * rec["cpi"] / 48e3, rel=1e-3)
    assert rec["instructions_per_mac"] == pytest.approx(
        rec["instructions"] / cost_of("12x12gray/c4k3-p2-d8", 3).macs, rel=1e-3)


@needs_device
@pytest.mark.slow
def test_export_on_a_core_writes_device_json_and_emulate_rebuilds_it(tmp_path, capsys):
    """export --core measures the pick on images held out of calibration (device.json);
    emulate --network rebuilds the same int8 network from the saved calibration images."""
    from test_export_command import make_run

    run = make_run(tmp_path / "run")
    assert main(["export", str(run), "--core", "cortex-m7", "--clock-mhz", "200",
                 "--device-images", "5", "--calib", "20"]) == 0
    out = capsys.readouterr().out
    assert "device        cortex-m7:" in out and "bit-exact" in out
    rec = json.loads((run / "export" / "device.json").read_text())
    assert rec["bit_exact"] and rec["images"] == 5 and rec["clock_mhz"] == 200
    summary = json.loads((run / "export" / "summary.json").read_text())
    assert summary["device"]["instructions"] == rec["instructions"]
    with np.load(run / "export" / "calibration.npz") as f:
        assert len(f["calib"]) == 20 and len(f["held_out"]) == 5
        # held out: none of the device images is a calibration image
        calib = {bytes(x) for x in f["calib"].reshape(20, -1)}
        assert not any(bytes(x) in calib for x in f["held_out"].reshape(5, -1))
    assert main(["emulate", "--network", str(run / "export" / "network.npz"), "--core",
                 "cortex-m7", "--images", "5", "--json"]) == 0
    again = json.loads(capsys.readouterr().out)
    # same int8 network, same images: the same count to the instruction
    assert again["bit_exact"] and again["instructions"] == rec["instructions"]
    assert again["flash_bytes"] == rec["flash_bytes"]


def test_emulate_network_without_calibration_says_what_to_do(tmp_path, capsys):
    """An exported network whose calibration.npz is gone: exit 2 naming the file and --data."""
    from tinyconv.network import Network

    if not HAVE_TOOLS:
        pytest.skip("needs the cross-compiler and QEMU")
    net = Network.from_arch("8x8gray/c4k3-gap", 3)
    path = tmp_path / "network.npz"
    net.save(path, arrays={"norm_mean": np.full(1, 0.5, np.float32),
                           "norm_std": np.full(1, 0.25, np.float32)})
    assert main(["emulate", "--network", str(path)]) == 2
    err = capsys.readouterr().err
    assert "calibration.npz not found" in err and "--data" in err


def test_a_network_too_big_for_the_board_is_refused_before_any_c(capsys):
    """More constants than the board's 4 MB of code memory: exit 2 with the figures, at once."""
    if not HAVE_TOOLS:
        pytest.skip("needs the cross-compiler and QEMU")
    assert main(["emulate", "64x64rgb/d1024", "--classes", "3"]) == 2
    err = capsys.readouterr().err
    # 256*3 table + 64*64*3*1024 weights + 16 B per output channel, and the 3-way head
    flash = 256 * 3 + 64 * 64 * 3 * 1024 + 16 * 1024 + 1024 * 3 + 16 * 3
    assert cost_of("64x64rgb/d1024", 3).flash_bytes == flash
    assert f"needs {flash:,} bytes of constants" in err and "4 MB" in err
