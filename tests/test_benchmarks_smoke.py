"""The engine benchmark script runs end to end and writes the records it promises.

The script is run as a command (benchmarks are never imported by tests), in
its quick mode: one repeat of two steps, so no figure here means anything and
nothing is timed against a goal.
"""

from __future__ import annotations

import importlib.util
import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
SCRIPT = ROOT / "benchmarks" / "engine.py"
REQUIRED = ("net", "threads", "mode", "ours_ips", "peer_ips", "ratio", "gemm_gflops",
            "fraction_of_gemm")


@pytest.fixture(scope="module")
def quick_run(tmp_path_factory) -> tuple[list[dict], str]:
    out = tmp_path_factory.mktemp("bench") / "records.json"
    proc = subprocess.run([sys.executable, str(SCRIPT), "--quick", "--no-startup",
                           "--threads", "1", "--nets", "N1,N2", "--json", str(out)],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return json.loads(out.read_text(encoding="utf-8")), proc.stdout


@pytest.mark.slow  # one child process importing numpy, numba and torch: ~5-12 s
def test_records_have_the_promised_keys(quick_run):
    """Every record has the JSON keys, one per net and mode, with positive rates."""
    records, _ = quick_run
    assert sorted((r["net"], r["mode"]) for r in records) == [
        ("N1", "infer"), ("N1", "train"), ("N2", "infer"), ("N2", "train")]
    for r in records:
        assert set(REQUIRED) <= set(r), set(REQUIRED) - set(r)
        assert r["threads"] == 1 and r["blas_threads"] in (None, 1) and r["numba_threads"] == 1
        assert r["ours_ips"] > 0 and r["gemm_gflops"] > 0
        assert math.isclose(r["fraction_of_gemm"],
                            r["ours_ips"] * r["flops_per_image"] / 1e9 / r["gemm_gflops"])


@pytest.mark.slow  # one child process importing numpy, numba and torch: ~5-12 s
def test_flops_follow_the_protocol(quick_run):
    """Training counts 6 x MACs FLOPs per image and inference 2 x MACs."""
    # The counting rule is the speed protocol's (shared/BENCHMARKS.md): training
    # is about three forward passes, a forward pass two FLOPs per MAC (common practice).
    records, _ = quick_run
    for r in records:
        assert r["flops_per_image"] == (6 if r["mode"] == "train" else 2) * r["macs"]


@pytest.mark.slow  # one child process importing numpy, numba and torch: ~5-12 s
def test_counts_match_the_reference_table(quick_run):
    """Parameters and MACs of N1 and N2 equal the protocol's table, on both engines."""
    records, _ = quick_run
    # shared/BENCHMARKS.md table; each value also follows by hand from
    # k*k*c_in*f + f and h*w*k*k*c_in*f (computed): N1 3072*10 + 10 = 30,730 params,
    # N2 conv 3->8 (224) + conv 8->16 (1,168) + dense 1024->10 (10,250) = 11,642.
    table = {"N1": (30_730, 30_720), "N2": (11_642, 526_336)}
    for r in records:
        assert (r["params"], r["macs"]) == table[r["net"]]
        assert r["params_ours_net"] == table[r["net"]][0]


@pytest.mark.slow  # one child process importing numpy, numba and torch: ~5-12 s
def test_peer_columns_follow_torch(quick_run):
    """With torch the peer is timed and ratio = ours/peer; without it the peer keys are null."""
    records, stdout = quick_run
    have_torch = importlib.util.find_spec("torch") is not None
    for r in records:
        if have_torch:
            assert r["peer_ips"] > 0 and r["torch_threads"] == 1
            assert math.isclose(r["ratio"], r["ours_ips"] / r["peer_ips"])
            assert r["params_peer_net"] == r["params"]
        else:
            assert r["peer_ips"] is None and r["ratio"] is None
    assert "1. ours / peer" in stdout and "QUICK RUN" in stdout


def test_bad_net_name_is_refused():
    """An unknown network name exits 2 naming the value and the allowed names."""
    proc = subprocess.run([sys.executable, str(SCRIPT), "--nets", "N9"], capture_output=True,
                          text=True, timeout=60, cwd=ROOT)
    assert proc.returncode == 2
    assert "'N9'" in proc.stderr and "N1, N2, N3, N4" in proc.stderr


@pytest.mark.slow  # one child process importing numpy and numba: ~3-10 s
def test_profile_lists_every_layer_of_n2():
    """The per-layer profile of N2 names each of its ops, the loss, the update and the products."""
    proc = subprocess.run([sys.executable, str(SCRIPT), "--profile", "N2", "--quick"],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr[-3000:]
    out = proc.stdout
    # The op names are those of tinyconv.arch.expand for N2 (DEVELOPERS.md: 'position:token').
    for name in ("1:c8k3", "2:p2", "3:c16k3", "4:p2", "head:flatten", "head:dense"):
        assert name in out
    # First conv's product shape, computed: 64 x 32 x 32 rows, 3 x 3 x 3 columns, 8 filters.
    assert "SGD update" in out and "M=65,536 K=27 f=8" in out and "im2col" in out


@pytest.mark.slow  # two cross-compiled builds run under QEMU: ~3-6 s
def test_device_benchmark_runs_and_checks_bit_exactness(tmp_path):
    """benchmarks/device.py builds plain and fast C for one network, and every record
    says whether it was bit-exact (a device figure that is wrong counts for nothing)."""
    import shutil
    if not all(shutil.which(t) for t in ("arm-none-eabi-gcc", "qemu-system-arm")):
        pytest.skip("needs Debian's gcc-arm-none-eabi and qemu-system-arm")
    out = tmp_path / "device.json"
    proc = subprocess.run([sys.executable, str(ROOT / "benchmarks" / "device.py"), "--cores",
                           "cortex-m3", "--nets", "7", "--images", "1", "--json", str(out)],
                          capture_output=True, text=True, timeout=300, cwd=ROOT)
    assert proc.returncode == 0, proc.stderr[-3000:]
    records = json.loads(out.read_text())
    assert [r["build"] for r in records] == ["plain", "portable"]  # no DSP on a Cortex-M3
    assert all(r["bit_exact"] and r["instructions_per_mac"] > 0 for r in records)
