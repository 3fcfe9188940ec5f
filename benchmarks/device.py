"""How many instructions the generated C spends per multiply-accumulate, per core.

    python benchmarks/device.py                      # every core, the reference networks
    python benchmarks/device.py --cores cortex-m4 --json device.json

Builds each network's int8 C (seeded random weights) three ways in one run --
the plain loop nests, the fast kernels in portable C, the fast kernels with the
DSP path where the core has it -- cross-compiles them with arm-none-eabi-gcc
-O2, runs them under qemu-system-arm -icount shift=0 (exact instruction
counts) and prints per network and core the instructions per MAC of the whole
network, per layer kind (instructions of that kind's steps / their MACs; for
pooling, per input value read), the ratio to the plain loops, the code bytes
and what they add over the plain loops (the largest such growth is printed
last, beside the goal of at most 4 KB). Every build is checked bit-exact against the NumPy integer reference;
a mismatch is printed as such. Instruction counts, not seconds: they repeat
exactly, whatever else the machine does.
"""

from __future__ import annotations

import argparse
import json
import sys
from math import prod
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tinyconv.cost import cost_of  # noqa: E402
from tinyconv.device.cores import CORES  # noqa: E402
from tinyconv.device.measure import measure, random_network  # noqa: E402
from tinyconv.device.model import device_steps  # noqa: E402
from tinyconv.device.toolchain import ToolMissing, find_toolchain  # noqa: E402

#: the networks: the examples of the speed goal, the demo's pick and one per layer kind
NETWORKS = (
    ("32x32gray/c16k3-p2-c32k3-p2-gap", 8, "two convs, 1-channel first layer"),
    ("32x32rgb/c16k3-p2-dw3-c32k1-p2-gap", 10, "N4: conv, depthwise, 1x1"),
    ("16x16gray/c32k3-p2-c32k3-p2-c32k3-p2-gap", 8, "the demo's pick"),
    ("32x32rgb/c8k3-p2-c16k3-p2", 10, "N2: flatten head"),
    ("16x16rgb/c32k3-c32k3-gap", 4, "wide 3x3 convs"),
    ("16x16rgb/c32k1-c32k1-gap", 4, "1x1 convs"),
    ("32x32rgb/c32k1-dw3-dw3-gap", 4, "depthwise"),
    ("16x16rgb/d64-d64", 8, "dense"),
    ("16x16rgb/c8k3-[c16k1-dw3-c8k1]-p2-[c8k3-c8k3]-gap", 5, "residual blocks, most kernels"),
)
#: the issue's goal for the code the fast kernels add over the plain loops
CODE_GROWTH_GOAL = 4096
BUILDS = (("plain", "plain", ()), ("portable", "fast", ("-DTC_USE_DSP=0",)),
          ("dsp", "fast", ()))


def kind_of(op) -> str:
    if op.kind == "conv":
        return "conv1x1" if op.kernel == 1 else "conv"
    if op.kind in ("maxpool", "avgpool", "gap"):
        return "pool"
    return op.kind


def per_kind(arch: str, k: int, m) -> dict[str, float]:
    """Instructions per MAC (per value read for pooling) of each layer kind's steps."""
    rows = cost_of(arch, k).rows
    work: dict[str, list[float]] = {}
    for (row, _, step_kind, op, _), step in zip(device_steps(arch, k), m.steps):
        if step_kind == "input":
            continue
        kind = "dense" if step_kind == "head" else kind_of(op)
        amount = prod(op.in_shape) if kind == "pool" else rows[row].macs
        pair = work.setdefault(kind, [0.0, 0.0])
        pair[0] += step.instructions
        pair[1] += amount
    return {kind: i / a for kind, (i, a) in work.items() if a}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--cores", default=",".join(CORES))
    parser.add_argument("--nets", default=None, help="comma-separated indexes into the list")
    parser.add_argument("--images", type=int, default=2)
    parser.add_argument("--json", type=Path, default=None)
    args = parser.parse_args(argv)
    try:
        tools = find_toolchain()
    except ToolMissing as exc:
        print(f"device benchmark skipped: {exc}", file=sys.stderr)
        return 0
    nets = NETWORKS if args.nets is None else [NETWORKS[int(i)] for i in args.nets.split(",")]
    records, growth = [], 0
    print(f"{'network':44s} {'core':10s} {'build':8s} {'instr/MAC':>9s} {'x plain':>7s} "
          f"{'code B':>7s} {'+code':>6s}  per layer kind (instructions per MAC; pooling per "
          "value read)")
    for arch, k, what in nets:
        qnet, images = random_network(arch, k, seed=3)
        macs = cost_of(arch, k).macs
        for core_name in args.cores.split(","):
            core = CORES[core_name]
            base = plain_code = None
            for build, style, flags in BUILDS:
                if build == "dsp" and not core.dsp:
                    continue
                m = measure(qnet, images[:args.images], core, tools=tools, macs=macs,
                            style=style, extra_flags=flags)
                ipm = m.instructions / macs
                base = base or ipm
                plain_code = plain_code or m.flash_code_bytes
                growth = max(growth, m.flash_code_bytes - plain_code)
                kinds = per_kind(arch, k, m)
                rec = {"arch": arch, "about": what, "core": core.name, "build": build,
                       "instructions": m.instructions, "macs": macs,
                       "instructions_per_mac": ipm, "code_bytes": m.flash_code_bytes,
                       "bit_exact": m.bit_exact, "per_kind": kinds}
                records.append(rec)
                shown = ", ".join(f"{kind} {v:.2f}" for kind, v in sorted(kinds.items()))
                flag = "" if m.bit_exact else "  NOT BIT-EXACT"
                print(f"{arch:44s} {core.name:10s} {build:8s} {ipm:9.2f} {base / ipm:7.2f} "
                      f"{m.flash_code_bytes:7d} {m.flash_code_bytes - plain_code:+6d}  "
                      f"{shown}{flag}", flush=True)
    print(f"largest code growth over the plain loops: {growth:,} bytes "
          f"(goal: at most {CODE_GROWTH_GOAL:,})")
    if args.json:
        args.json.write_text(json.dumps(records, indent=1))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
