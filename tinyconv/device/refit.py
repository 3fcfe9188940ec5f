"""Refit the device model's constants to emulator measurements.

    python -m tinyconv.device.refit [--cores cortex-m3,cortex-m4,...] [--out FILE]

Measures every network of :data:`FIT_NETWORKS` on each core (random weights,
two images each: a step's instruction count hardly depends on the pixels),
fits per core and step kind the instruction coefficients by least squares on
the per-step counts, the call overhead, the code size per kernel and per step,
and the stack bound, and writes ``constants.json`` (by default the package's
own). Run it whenever the generated kernels, the harness or the compiler
change; the tests compare the model with fresh measurements of networks that
are *not* in this list.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
from pathlib import Path

import numpy as np

from tinyconv.cost import cost_of
from tinyconv.device.cores import CORES, core_named
from tinyconv.device.measure import measure, random_network
from tinyconv.device.features import STEP_MODELS
from tinyconv.device.model import device_steps, step_features
from tinyconv.device.toolchain import find_toolchain

#: networks the constants are fitted on: every step kind, strides, valid padding,
#: 1 to 48 channels, 6x6 to 48x48 maps, residual blocks and stacked colour
#: modes (the tests hold out others)
FIT_NETWORKS = (
    ("8x8gray", 3),
    ("8x8gray/c4k3-gap", 3),
    ("12x12gray/c4k4v-p2-d8-d6", 3),
    ("16x16rgb/c8k3-bn-p2-dw3s2-bn-c8k1-a2-gap-d16-bn", 5),
    ("20x20rgb/c6k5s2v-dw5-a2-c4k3s2", 4),
    ("9x9hsv/dw3-bn-p3-d5", 2),
    ("32x32gray/c16k3-p2-c32k3-p2-gap", 8),
    ("32x32rgb/c8k3-p2-c16k3-p2", 10),
    ("24x24rgb/c12k5-p2-dw3-c24k1-p3-gap", 6),
    ("28x28gray/c8k3s2-dw3-c16k1-dw3s2-c32k1-gap", 10),
    ("16x16gray/c32k3-p2-c32k3-p2-c32k3-p2-gap", 8),
    ("48x48gray/c4k7s2-p2-c8k3-a2-gap", 4),
    ("6x6rgb/c16k1-c16k1-d12", 7),
    ("20x20gray/c10k3v-c20k3v-p4-d20-d10", 5),
    ("40x40rgb/dw5s2-c12k1-p2-c24k3-gap", 3),
    ("12x12ycc/c48k3-p3-c8k1-gap", 9),
    ("32x32rgb/c16k3-p2-dw3-c32k1-p2-gap", 10),
    ("18x18gray/c6k2v-p3-c12k2v-a2-d24", 4),
    ("16x16rgb/c24k3s2-c12k3-p2-c6k1", 3),
    ("36x36gray/c4k5-p2-dw5-p2-c16k1-gap-d8", 2),
    ("24x24gray/c24k3-dw3-dw5s2-a3-gap", 5),
    ("32x32hsv/dw3-dw3s2-c20k1-dw7-p2-c40k1-gap", 6),
    ("20x20rgb/c32k1-dw3v-p2-dw3s2-gap-d32", 4),
    ("14x14gray/c64k3-dw3-a2-c8k3-p2-d16", 3),
    ("16x16rgb/c3k3-p4-c6k3-p2-d4", 2),
    ("30x30gray/c5k5v-p2-c10k3v-p3-a2-d10", 10),
    ("16x16rgb/dw3-c16k1-p2-dw3-c24k1-a2-dw3-c32k1-gap", 8),
    ("10x10ycc/c20k3-c20k3-gap-d40-d20", 6),
    ("16x16rgb/c8k3-[c16k1-dw3-c8k1]-p2-[c8k3-c8k3]-gap", 5),
    ("12x12gray/[c1k3]-c6k3s2-[c12k1-dw5-c6k1]-d8", 4),
    ("20x20hsv/c12k3-p2-[c24k1-bn-dw3-bn-c12k1-bn]-gap", 7),
    ("8x8rgb+ycc/c4k3-[x20]-[c4k1]-d6", 3),
    ("32x32gray/c16k3-p2-[c32k1-dw3-c16k1]-[c32k1-dw3-c16k1]-p2-gap", 8),
)
FILE = Path(__file__).with_name("constants.json")
STACK_MARGIN = 1.25


def _fit(rows: list[dict[str, float]], targets: list[float]) -> dict[str, float]:
    """Non-negative least squares (every count costs instructions or bytes, never saves them)."""
    try:
        from scipy.optimize import nnls
    except ImportError:
        raise SystemExit("error: refitting needs SciPy; install the test extra: "
                         "pip install -e '.[test]'") from None
    names = sorted({name for row in rows for name in row})
    a = np.array([[row.get(n, 0.0) for n in names] for row in rows])
    b = np.asarray(targets, float)
    # relative errors matter, not absolute ones: weight each row by 1 / its target
    w = 1.0 / np.maximum(np.abs(b), 50.0)
    scale = np.maximum(np.abs(a * w[:, None]).max(axis=0), 1e-12)
    coef, _ = nnls(a * w[:, None] / scale, b * w, maxiter=50 * len(names))
    return {n: float(c / sc) for n, c, sc in zip(names, coef, scale)}


def fit_core(core_name: str, networks=FIT_NETWORKS, say=print) -> dict:
    """Measure ``networks`` on one core and fit its constants."""
    core = core_named(core_name)
    tools = find_toolchain()
    per_kind: dict[str, tuple[list, list]] = {}
    overheads, code_rows, code_targets, stacks = [], [], [], []
    for arch, k in networks:
        qnet, images = random_network(arch, k, seed=len(arch))
        m = measure(qnet, images[:2], core, tools=tools, macs=cost_of(arch, k).macs)
        if not m.bit_exact:
            raise SystemExit(f"error: {arch} on {core.name} is not bit-exact; fix that first")
        steps = device_steps(arch, k)
        for (row, name, kind, op, in_shape), fig in zip(steps, m.steps):
            rows, targets = per_kind.setdefault(kind, ([], []))
            rows.append(step_features(kind, op, in_shape))
            targets.append(fig.instructions)
        overheads.append(m.instructions - sum(s.instructions for s in m.steps))
        kinds = [kind for _, _, kind, _, _ in steps]
        feat = {"base": 1.0}
        for kernel in {kn for kind in kinds for kn in STEP_MODELS[kind].kernels}:
            feat[f"kernel:{kernel}"] = 1.0
        for kind in kinds:
            feat[f"call:{kind}"] = feat.get(f"call:{kind}", 0.0) + 1.0
        code_rows.append(feat)
        code_targets.append(m.flash_code_bytes)
        stacks.append(m.stack_bytes)
        say(f"{core.name:11s} {arch:48s} {m.instructions:>11,d} instructions  "
            f"{m.instructions_per_mac:5.2f}/MAC  code {m.flash_code_bytes:5d} B  "
            f"stack {m.stack_bytes} B")
    code = _fit(code_rows, code_targets)
    return {
        "steps": {kind: _fit(rows, targets) for kind, (rows, targets) in per_kind.items()},
        "call": float(np.mean(overheads)),
        "code": {"base": code.get("base", 0.0),
                 "kernel": {kn: code.get(f"kernel:{kn}", 0.0)
                            for kn in sorted({k for m in STEP_MODELS.values() for k in m.kernels})},
                 "call": {kind: code.get(f"call:{kind}", 0.0) for kind in STEP_MODELS}},
        "stack_bytes": int(-(-max(stacks) * STACK_MARGIN // 16) * 16),
    }


def compiler_version() -> str:
    tools = find_toolchain()
    out = subprocess.run([tools.gcc, "--version"], capture_output=True, text=True).stdout
    return out.splitlines()[0] if out else "unknown"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m tinyconv.device.refit",
                                     description=__doc__.split("\n\n")[0])
    parser.add_argument("--cores", default=",".join(CORES),
                        help="comma-separated cores to fit (default: all)")
    parser.add_argument("--out", type=Path, default=FILE, help="file to write")
    args = parser.parse_args(argv)
    names = [core_named(n).name for n in args.cores.split(",") if n.strip()]
    old = json.loads(args.out.read_text()) if args.out.exists() else {"cores": {}}
    cores = dict(old.get("cores", {}))
    for name in names:
        cores[name] = fit_core(name)
    data = {"about": "device model constants fitted to qemu-system-arm -icount shift=0 "
                     "counts by python -m tinyconv.device.refit",
            "compiler": compiler_version(), "opt": "-O2",
            "networks": [f"{a} ({k} classes)" for a, k in FIT_NETWORKS],
            "cores": {n: cores[n] for n in sorted(cores)}}
    args.out.write_text(json.dumps(data, indent=1, sort_keys=False) + "\n")
    print(f"wrote {args.out}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
