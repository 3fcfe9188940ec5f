"""``tinyconv emulate``: run a network's int8 C on an emulated Cortex-M core and measure it.

Either an architecture text (seeded random weights and calibration images)::

    tinyconv emulate 32x32gray/c16k3-p2-c32k3-p2-gap --classes 8 --core cortex-m4

or an exported network (``network.npz`` of ``tinyconv export``; its int8 form is
rebuilt from the calibration images the export saved beside it)::

    tinyconv emulate --network RUN/export/network.npz --core cortex-m7

It quantises the network, writes the C, cross-compiles it with
``arm-none-eabi-gcc`` and a start-up file and linker script of ours for the
core's board, runs it under ``qemu-system-arm -icount shift=0`` and prints,
per core, the measured instructions per image, instructions per MAC, the time
at a clock (with the assumed cycles per instruction beside it), flash and RAM,
whether every logit equals the NumPy integer reference, and the cost model's
estimate of the same figures. Exit 0 when bit-exact, 1 when not, 2 for bad
input or a missing cross-compiler or emulator.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from tinyconv.commands._args import add_device_options, count, positive_int

DEFAULT_CORE = "cortex-m4"


def configure(parser: argparse.ArgumentParser) -> None:
    """Options of the emulate command."""
    parser.add_argument("arch", metavar="ARCH", nargs="?", default=None,
                        help="architecture text, e.g. 32x32gray/c16k3-p2-c32k3-p2-gap "
                             "(or give --network)")
    parser.add_argument("--network", metavar="NPZ", default=None,
                        help="an exported network.npz instead of an architecture")
    parser.add_argument("--data", metavar="DATA", default=None,
                        help="images for calibration and measurement of --network when no "
                             "calibration.npz lies beside it (a data spec as for search)")
    parser.add_argument("--classes", type=positive_int, default=8, metavar="K",
                        help="classes of the head for ARCH (default 8)")
    add_device_options(parser, f"the core to measure on, {DEFAULT_CORE} unless given",
                       "clock of the part for the time figure", many=True)
    parser.add_argument("--images", type=positive_int, default=8, metavar="N",
                        help="images to classify (default 8)")
    parser.add_argument("--seed", type=count, default=0, metavar="S",
                        help="seed of the random weights and images (default 0)")
    parser.add_argument("--opt", default="-O2", choices=["-O0", "-O1", "-O2", "-O3", "-Os"],
                        help="compiler optimisation level (default -O2)")
    parser.add_argument("--keep", metavar="DIR", default=None,
                        help="keep the sources, ELF files and emulator output in DIR")
    parser.add_argument("--json", action="store_true",
                        help="print one JSON object (a list of them for several cores)")


def cores_of(names: list[str] | None):
    """The cores asked for (``all`` means every supported core)."""
    from tinyconv.device.cores import CORES, core_named

    names = names or [DEFAULT_CORE]
    out = []
    for name in names:
        for part in name.split(","):
            if part.strip().lower() == "all":
                out.extend(CORES.values())
            elif part.strip():
                out.append(core_named(part))
    return list(dict.fromkeys(out))


def _exported(args):
    """(qnet, images, arch, classes, source) for ``--network``."""
    import numpy as np

    from tinyconv.errors import InputError
    from tinyconv.network import Network
    from tinyconv.quant import quantize_network
    from tinyconv.device.calibration import load_calibration, images_from_data

    path = Path(args.network)
    saved = Network.load(path)
    net = saved.network
    if "norm_mean" not in saved.arrays or "norm_std" not in saved.arrays:
        raise InputError(f"{path} holds no input normalisation (norm_mean, norm_std); give a "
                         "network.npz written by `tinyconv export`")
    if args.data is not None:
        calib, images = images_from_data(args.data, net.arch.input, args.images, args.seed)
    else:
        calib, images = load_calibration(path.parent, net.arch.input.shape, args.images)
    qnet = quantize_network(net, saved.arrays["norm_mean"], saved.arrays["norm_std"], calib,
                            rounding=str(saved.meta.get("rounding", "feedback")))
    return qnet, np.asarray(images), str(net.arch), net.n_classes, f"weights of {path}"


def run(args: argparse.Namespace) -> int:
    """Measure on each core; print the figures (stdout) and progress (stderr)."""
    from tinyconv.cost import cost_of
    from tinyconv.device.cores import check_clock
    from tinyconv.device.figures import device_record, record_lines
    from tinyconv.device.measure import measure, random_network
    from tinyconv.device.toolchain import find_toolchain
    from tinyconv.errors import InputError

    if (args.arch is None) == (args.network is None):
        raise InputError("give an architecture text or --network NPZ (one of them), e.g. "
                         "tinyconv emulate 32x32gray/c8k3-p2-gap --core cortex-m4")
    cores = cores_of(args.core)
    clock = check_clock(args.clock_mhz) if args.clock_mhz is not None else None
    tools = find_toolchain()  # before any work: a missing tool is the first thing to know
    if args.network is not None:
        qnet, images, arch, k, source = _exported(args)
    else:
        from tinyconv.arch import parse
        arch, k = str(parse(args.arch)), args.classes
        cost_of(arch, k)  # a bad text or class count is reported before quantising
        qnet, images = random_network(arch, k, seed=args.seed, n_images=max(64, args.images))
        images = images[:args.images]
        source = f"random weights (seed {args.seed})"
    macs = cost_of(arch, k).macs
    records = []
    for core in cores:
        print(f"building for {core.name} and running {len(images)} images on QEMU "
              f"{core.board}", file=sys.stderr, flush=True)
        keep = Path(args.keep) / core.name if args.keep else None
        m = measure(qnet, images, core, opt=args.opt, workdir=keep, tools=tools, macs=macs)
        records.append(device_record(m, arch, k, core, clock, source))
    if args.json:
        print(json.dumps(records[0] if len(records) == 1 else records, indent=2))
    else:
        for rec in records:
            print("\n".join(record_lines(rec)))
    return 0 if all(r["bit_exact"] for r in records) else 1
