"""Write the unrolled F(4x4, 3x3) transform kernels (tinyconv/layers/convalg/winograd_f4_unrolled.py).

The transforms of :mod:`tinyconv.layers.convalg.winograd_f4` visit the non-zero
coefficients of any matrix in loops, which keeps them short but 2-3x slower
than straight-line code. This script prints that straight-line code: for each
row of a tile, the row pass as a handful of scalar expressions (the
coefficients written in), then the column pass, with the channel loop
innermost so that it vectorises. Tiles that reach past the output edge take
the loop kernels.

Run ``python devtools/gen_winograd_f4.py > tinyconv/layers/convalg/winograd_f4_unrolled.py``
after changing the matrices; ``tests/test_layers_winograd.py`` checks that the
file is what this script prints.
"""

from __future__ import annotations

import numpy as np

from tinyconv.layers.convalg.winograd_f4 import AT, BT

HEADER = '''"""Unrolled F(4x4, 3x3) transform kernels. GENERATED: do not edit.

Written by ``python devtools/gen_winograd_f4.py``; the matrices and the
loop versions (used for edge tiles) are in :mod:`tinyconv.layers.convalg.winograd_f4`.
``k`` holds the coefficients 2, 4, 5 and 8 in the data's dtype.
"""

from numba import njit

from tinyconv.layers.convalg import winograd_f4 as kw4

CONSTANTS = {CONSTANTS!r}
'''


#: The coefficient magnitudes other than 1 (all entries of B^T and A^T are integers).
CONSTANTS = (2, 4, 5, 8)
# The kernels read them from an array of the data's dtype (argument ``k``):
# a Python float literal would promote float32 arithmetic to float64.
UNPACK = "    " + ", ".join(f"k{c}" for c in CONSTANTS) + " = " + \
    ", ".join(f"k[{i}]" for i in range(len(CONSTANTS)))


def _term(coef: float, name: str) -> str:
    if coef == 1:
        return f"+ {name}"
    if coef == -1:
        return f"- {name}"
    size = abs(coef)
    if size != int(size) or int(size) not in CONSTANTS:
        raise ValueError(f"coefficient {coef} is not in CONSTANTS {CONSTANTS}")
    sign = "+" if coef > 0 else "-"
    return f"{sign} k{int(size)} * {name}"


def combo(coefs, names) -> str:
    """``sum coef * name`` over the non-zero coefficients, as Python source."""
    parts = [_term(c, n) for c, n in zip(coefs, names) if c != 0]
    text = " ".join(parts)
    return text[2:] if text.startswith("+ ") else "-" + text[2:]


def _two_pass(p: np.ndarray, read, write, indent: str) -> list[str]:
    """Lines computing ``write(i, l, expr)`` for ``(P D P^T)[i, l]``, ``D[k, j] = read(k, j)``, row by row."""
    a_out, a_in = p.shape
    lines = []
    for i in range(a_out):
        for j in range(a_in):
            lines.append(f"{indent}t{j} = {combo(p[i], [read(k, j) for k in range(a_in)])}")
        for l in range(a_out):
            lines.append(indent + write(i, l, combo(p[l], [f"t{j}" for j in range(a_in)])))
    return lines


def _kernel(signature: str, doc: str, setup: list[str], edge: str | None, channel: str,
            body: list[str]) -> list[str]:
    """A kernel: the loops over images and tiles, then over channels around ``body``.

    ``edge``: the call that handles a tile reaching past the output edge (then
    the unrolled body runs on whole tiles only).
    """
    lines = ["", "", "@njit(cache=True)", f"def {signature}:", f'    """{doc}"""', UNPACK]
    lines += [f"    {line}" for line in setup]
    lines += ["    for b in range(n):",
              "        for ty in range(th):",
              "            r = 4 * ty",
              "            for tx in range(tw):",
              "                q = 4 * tx",
              "                t = (b * th + ty) * tw + tx"]
    if edge is not None:
        lines += ["                if r + 4 > oh or q + 4 > ow:",
                  f"                    {edge}",
                  "                    continue"]
    lines.append(f"                for {channel} in range({'c' if channel == 'ch' else 'f'}):")
    return lines + body


INDENT = " " * 20


def input_kernel() -> list[str]:
    return _kernel(
        "input_transform(xp, k, th, tw, v)",
        "``v[:, t, :] = B^T d B`` for each 6 x 6 tile of ``xp (n, hp, wp, c)``.",
        ["n, c = xp.shape[0], xp.shape[3]"], None, "ch",
        _two_pass(BT, lambda k, j: f"xp[b, r + {k}, q + {j}, ch]",
                  lambda i, l, e: f"v[{6 * i + l}, t, ch] = {e}", INDENT))


def input_adjoint_kernel() -> list[str]:
    return _kernel(
        "input_transform_adjoint(dv, k, th, tw, gxp)",
        "``gxp`` = sum over tiles of ``B dV B^T`` at each tile's place (overwrites it).",
        ["gxp[:] = 0.0", "n, c = gxp.shape[0], gxp.shape[3]"], None, "ch",
        _two_pass(BT.T, lambda k, j: f"dv[{6 * k + j}, t, ch]",
                  lambda i, l, e: f"gxp[b, r + {i}, q + {l}, ch] += {e}", INDENT))


def output_kernel() -> list[str]:
    def write(i, l, e):
        return (f"u = {e} + bias[o]\n{INDENT}"
                f"y[b, r + {i}, q + {l}, o] = max(u, zero) if relu else u")
    return _kernel(
        "output_transform(m, k, pr, pc, pv, bias, relu, th, tw, y)",
        "``y`` block ``= A^T m A + bias`` (ReLU if ``relu``); edge tiles by the loop kernel.",
        ["zero = k[0] - k[0]  # 0 in the data's dtype", "n, oh, ow, f = y.shape"],
        "kw4.output_tile(m, pr, pc, pv, bias, relu, b, ty, tx, th, tw, y)", "o",
        _two_pass(AT, lambda k, j: f"m[{6 * k + j}, t, o]", write, INDENT))


def output_adjoint_kernel() -> list[str]:
    return _kernel(
        "output_transform_adjoint(dy, k, pr, pc, pv, th, tw, dm)",
        "``dm[:, t, :] = A dY A^T`` per 4 x 4 block of ``dy``; edge tiles by the loop kernel.",
        ["n, oh, ow, f = dy.shape"],
        "kw4.output_adjoint_tile(dy, pr, pc, pv, b, ty, tx, th, tw, dm)", "o",
        _two_pass(AT.T, lambda k, j: f"dy[b, r + {k}, q + {j}, o]",
                  lambda i, l, e: f"dm[{6 * i + l}, t, o] = {e}", INDENT))


def source() -> str:
    """The whole generated module."""
    lines = [HEADER.replace("{CONSTANTS!r}", repr(CONSTANTS)).rstrip("\n")]
    for make in (input_kernel, output_kernel, output_adjoint_kernel, input_adjoint_kernel):
        lines += make()
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    print(source(), end="")
