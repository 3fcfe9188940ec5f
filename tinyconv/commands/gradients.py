"""``tinyconv gradients ARCH``: finite-difference check of every gradient of a network.

Builds the network in float64, feeds a seeded random batch through the loss
and compares every analytic gradient (input and each parameter tensor) with
central differences (:func:`tinyconv.gradients.check_network`; residual
additions also alone, through :func:`~tinyconv.gradients.check_joining`, and a
stacked input such as ``rgb+hsv`` per colour mode through the stacking op,
:func:`~tinyconv.gradients.check_stacked_input`), then prints
one row per layer and tensor, and which algorithm each standard convolution
ran (``--conv`` forces one: im2col, or Winograd F(2x2, 3x3) / F(4x4, 3x3)
where the layer is 3 x 3 of stride 1). Exit 0 when every tensor passes, 1
when any fails, 2 for a bad architecture or option.
"""

from __future__ import annotations

import argparse
import textwrap

import numpy as np

from tinyconv import gradients
from tinyconv.arch import BatchNorm, flat_layers, parse, parse_input
from tinyconv.layers.merge import Add
from tinyconv.errors import InputError
from tinyconv.layers import Conv
from tinyconv.layers.conv import ALGORITHMS
from tinyconv.network import Network

KINK_NOTE = ("kinks: the images are standard-normal and every bias and batch-norm shift is "
             f"drawn from N(0, {0.1:g}^2) instead of 0, so no pre-activation sits exactly on a "
             "ReLU kink and max-pool ties have probability 0; a coordinate whose +h/-h step "
             "still crosses a kink (a ReLU sign or a max-pool winner changes) is skipped and "
             "counted in the note")
SHIFT_STD = 0.1


def shift_away_from_kinks(net: Network, rng: np.random.Generator) -> None:
    """Draw every bias and batch-norm shift from N(0, SHIFT_STD^2), in place.

    Zero biases (the initial value) put exact zeros in front of a ReLU
    wherever the layer's input is all zero (e.g. a 1x1 convolution over
    channels a ReLU switched off), and a finite difference across such a tie
    measures a kink, not the gradient.
    """
    for name, array in net.param_list():
        if name.rsplit("/", 1)[1] in ("b", "beta"):
            array[...] = rng.normal(0.0, SHIFT_STD, size=array.shape)


def configure(parser: argparse.ArgumentParser) -> None:
    """Add this command's arguments."""
    parser.add_argument("arch", metavar="ARCH",
                        help="architecture text, e.g. 16x16gray/c4k3-p2-c8k3s2-bn-gap-d8")
    parser.add_argument("--input", metavar="HxWMODE", default=None,
                        help="input size and colour mode replacing the text's own, e.g. 8x8gray")
    parser.add_argument("--classes", type=int, default=4, metavar="K",
                        help="number of classes of the head (default 4)")
    parser.add_argument("--seed", type=int, default=0, metavar="S",
                        help="seed of the weights, the batch and the sampled coordinates "
                             "(default 0)")
    parser.add_argument("--batch", type=int, default=4, metavar="N",
                        help="images in the random batch (default 4)")
    parser.add_argument("--conv", choices=ALGORITHMS, default="auto",
                        help="algorithm of the standard convolutions: auto (what training "
                             "uses, by layer shape), im2col, winograd (F(2x2, 3x3)) or "
                             "winograd4 (F(4x4, 3x3)); the Winograd ones apply to 3x3 "
                             "stride-1 layers, the others keep im2col (default auto)")


def _set_conv_algorithm(net: Network, choice: str) -> list[tuple[str, str]]:
    """Force ``choice`` on the standard convolutions that can run it; (layer, algorithm) of each.

    A Winograd choice applies to 3 x 3 stride-1 layers; the others keep im2col.
    With ``auto`` each layer shows what training picks for its shape.
    """
    shown = []
    for i, layer in enumerate(net.layers):
        if not isinstance(layer, Conv):
            continue
        if choice != "auto":
            winograd_ok = layer.kernel == 3 and layer.stride == 1
            layer.algorithm = choice if choice == "im2col" or winograd_ok else "im2col"
        h, w = net.ops[i].in_shape[:2]
        shown.append((f"{i}:{net.ops[i].name}", layer.resolve_algorithm(h, w, training=True)))
    return shown


def _table(rows: list[gradients.GradRow]) -> str:
    """The rows as an aligned text table."""
    head = ("layer", "tensor", "shape", "max rel error", "verdict", "note")
    body = [(r.layer, r.tensor, "x".join(map(str, r.shape)) or "scalar",
             "n/a" if np.isnan(r.max_rel_error) else f"{r.max_rel_error:.2e}",
             "pass" if r.passed else "FAIL", r.note) for r in rows]
    widths = [max(len(str(line[i])) for line in (head, *body)) for i in range(len(head))]
    right = {3}  # numbers align right

    def fmt(line) -> str:
        cells = [str(c).rjust(w) if i in right else str(c).ljust(w)
                 for i, (c, w) in enumerate(zip(line, widths))]
        return "  ".join(cells).rstrip()

    rule = "  ".join("-" * w for w in widths)
    return "\n".join([fmt(head), rule] + [fmt(line) for line in body])


def run(args: argparse.Namespace) -> int:
    """Check the gradients; 0 if all pass, 1 if any fails."""
    arch = parse(args.arch)
    if args.input is not None:
        arch = parse(str(arch.with_input(parse_input(args.input))))
    if args.classes < 2:
        raise InputError(f"--classes must be at least 2, got {args.classes}")
    has_bn = any(isinstance(layer, BatchNorm) for layer in flat_layers(arch.layers))
    least = 2 if has_bn else 1
    if args.batch < least:
        raise InputError(f"--batch must be at least {least}"
                         f"{' (batch normalisation needs two images)' if has_bn else ''}, "
                         f"got {args.batch}")

    net = Network.from_arch(arch, args.classes, seed=args.seed, dtype=np.float64)
    algorithms = _set_conv_algorithm(net, args.conv)
    # The data come from their own stream, so they are not the same draws as the weights.
    rng = np.random.default_rng((args.seed, 2))
    x = rng.standard_normal((args.batch, *arch.input.shape))
    y = rng.integers(0, args.classes, size=args.batch)
    shift_away_from_kinks(net, rng)
    rows = gradients.check_network(net, x, y, seed=args.seed)
    modes = arch.input.modes
    if len(modes) > 1:
        # the same images as planes per colour mode, through the stacking op
        bounds = np.cumsum([0] + [int(parse_input(f"1x1{m}").channels) for m in modes])
        parts = [x[..., a:b] for a, b in zip(bounds, bounds[1:])]
        rows += gradients.check_stacked_input(net, parts, modes, y, seed=args.seed)
    for i, op in enumerate(net.ops):
        if op.kind == "add":
            # the addition alone too: its two inputs drawn at the map's shape
            pair = [rng.standard_normal((args.batch, *op.in_shape)) for _ in range(2)]
            layer = Add()
            layer.name = f"{i}:{op.name}"
            rows += gradients.check_joining(layer, pair, seed=args.seed)

    print(f"gradient check of {arch} with {args.classes} classes")
    print(f"float64, a batch of {args.batch} standard-normal images, seed {args.seed}")
    print(f"central differences, h = {gradients.STEP:g}; a tensor passes when its largest "
          f"relative error\n|a - n| / max(|a|, |n|) is below {gradients.THRESHOLD:g}")
    print(textwrap.fill(KINK_NOTE, width=88))
    if algorithms:
        print("convolutions: " + ", ".join(f"{name} {alg}" for name, alg in algorithms))
    print()
    print(_table(rows))
    print()
    failed = [r for r in rows if not r.passed]
    if failed:
        print(f"{len(failed)} of {len(rows)} tensors FAIL: "
              + ", ".join(f"{r.layer}/{r.tensor}" for r in failed))
        return 1
    print(f"all {len(rows)} tensors pass")
    return 0
