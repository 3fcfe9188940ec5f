"""Write an int8 network as one C99 source and one header.

The generated code needs no allocator, no floating point and nothing of the
C library beyond ``<stdint.h>`` and ``<string.h>``. Its parts:

* every constant as a ``static const`` array: the ``256 x c`` input table,
  and per conv/dwconv/dense layer the int8 weights and the int32 bias,
  multiplier and shift per output channel (the deployment layout of
  DEVELOPERS.md, so flash = the sum of their ``sizeof``): three arrays in the
  plain style, one array of ``[bias, multiplier, nh, code]`` records in the
  fast style (``{prefix}_l{i}_rec``, with the rounding constant; one pointer
  walks it; conv weights padded to whole groups of four values);
* one ``static int8_t`` activation buffer of exactly the cost model's int8
  peak, each tensor and scratch at an offset planned from the live ranges
  (:mod:`tinyconv.export.placement`): tensors alive at one step never overlap, a
  residual block's input stays in place until its addition;
* ``int32_t {prefix}_classify(const uint8_t *image, int8_t *logits)``: the
  image is ``h x w x c`` uint8 in row-major HWC order, already in the
  network's input size and colour mode; it writes the K int8 logits and
  returns the class: the arg-max of the last layer's outputs requantised with
  8 more fractional bits than the int8 logits, so that classes whose logits
  round to the same int8 value are still told apart (the first of equal
  values wins). It uses the one static activation buffer, so it is not re-entrant;
* ``{PREFIX}_MARK(step)`` before each step (0 is the input step) and after
  the last: empty unless the build defines it (the device measurement binds
  it to a tick counter to time each step), so it adds no code otherwise.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from tinyconv import __version__
from tinyconv.errors import InputError
from tinyconv.export import c_fast, c_kernels, c_layout
from tinyconv.export.c_steps import emitter_of
from tinyconv.export.placement import plan_buffer
from tinyconv.quant.quantize import QuantizedNetwork, QuantLayer

#: kernel styles and the function that writes each one's kernels
KERNELS = {"fast": c_fast.kernels_for, "plain": c_kernels.kernels_for}
STYLES = tuple(KERNELS)

MAX_PREFIX = 20
C_KEYWORDS = frozenset(
    "auto break case char const continue default do double else enum extern float for goto "
    "if inline int long register restrict return short signed sizeof static struct switch "
    "typedef union unsigned void volatile while _Bool _Complex _Imaginary".split())
_IDENT = re.compile(r"[A-Za-z][A-Za-z0-9_]*")


@dataclass(frozen=True)
class CArray:
    """One constant array of the generated source."""

    name: str
    ctype: str      # "int8_t" or "int32_t"
    count: int

    @property
    def nbytes(self) -> int:
        return self.count * (1 if self.ctype == "int8_t" else 4)


@dataclass(frozen=True)
class CCode:
    """The generated files' text and the figures they embody.

    Attributes
    ----------
    source, header : str
        Text of ``{prefix}.c`` and ``{prefix}.h``.
    arrays : tuple of CArray
        Every constant array, in the order written.
    activation_bytes : int
        Size of the static buffer.
    flash_bytes : int
        Sum of the arrays' bytes.
    """

    prefix: str
    source: str
    header: str
    arrays: tuple[CArray, ...]
    activation_bytes: int
    flash_bytes: int


def check_prefix(prefix: str) -> str:
    """A symbol prefix: a C identifier of at most 20 characters, not a keyword."""
    if not isinstance(prefix, str):
        raise InputError(f"prefix must be a string, got {type(prefix).__name__}")
    if not _IDENT.fullmatch(prefix) or len(prefix) > MAX_PREFIX or prefix in C_KEYWORDS:
        raise InputError(f"prefix {prefix!r} is not a usable C identifier: it must start with "
                         "a letter, hold only letters, digits and '_', be at most "
                         f"{MAX_PREFIX} characters and not be a C keyword; e.g. 'tiles' "
                         "or 'tc_marks'")
    return prefix


def _numbers(values: np.ndarray, per_line: int) -> str:
    """Comma-separated integers, ``per_line`` a line, indented."""
    flat = [str(int(v)) for v in np.asarray(values).reshape(-1)]
    lines = [", ".join(flat[i:i + per_line]) for i in range(0, len(flat), per_line)]
    return "    " + ",\n    ".join(lines)


def _array(arr: CArray, values: np.ndarray, align: str = "") -> str:
    per_line = 16 if arr.ctype == "int8_t" else 6
    return (f"static const {arr.ctype} {arr.name}[{arr.count}]{align} = {{\n"
            f"{_numbers(values, per_line)}\n}};\n")


def _align_macro(P: str) -> str:
    """``{P}_ALIGN``: word alignment of the int8 arrays where the compiler takes GCC's
    attribute (the fast kernels then load two words at once; elsewhere they check)."""
    return (f"/* int8 arrays on a word boundary where the compiler can be told so */\n"
            f"#if defined(__GNUC__)\n#define {P}_ALIGN __attribute__((aligned(4)))\n"
            f"#else\n#define {P}_ALIGN\n#endif\n\n")


def _input_loop(p: str, pixels: int, c: int) -> list[str]:
    """The input step's C: each pixel's channels through the table (``table[v * c + ch]``),
    the channels written out for up to four."""
    lines = [f"    for (i = 0; i < {pixels}; ++i) {{\n",
             f"        const uint8_t *px = image + i * {c};\n",
             f"        int8_t *q = {p}_activations + i * {c};\n"]
    if c <= 4:
        lines += [f"        q[{ch}] = {p}_input_table[(int32_t)px[{ch}] * {c} + {ch}];\n"
                  for ch in range(c)]
    else:
        lines += ["        int32_t ch;\n",
                  f"        for (ch = 0; ch < {c}; ++ch) "
                  f"q[ch] = {p}_input_table[(int32_t)px[ch] * {c} + ch];\n"]
    return lines + ["    }\n"]


def _comment_safe(text: str) -> str:
    """Text that cannot end a C comment or break a line."""
    text = "".join(ch if 32 <= ord(ch) < 127 else "?" for ch in str(text))
    return text.replace("*/", "* /").replace("/*", "/ *")


def _kernels(kinds: list[str], p: str, style: str) -> str:
    """The C text of the kernels the step ``kinds`` need: those of the style's kernel
    module (:data:`KERNELS`), then those of kinds whose emitter brings its own."""
    own = {kind: emitter_of(kind).kernels for kind in kinds}
    text = KERNELS[style]([kind for kind in kinds if own[kind] is None], p)
    return text + "".join(write(style, p) for write in dict.fromkeys(
        write for write in own.values() if write is not None))


def _dsp_switch(P: str) -> str:
    """The header's switch of the DSP path (on when the compiler targets such a core)."""
    return (f"/* 1: the products use the DSP extension's dual 16-bit multiply-accumulate\n"
            f"   (Cortex-M4, M7, M33); on by default when the compiler targets a core with\n"
            f"   it (__ARM_FEATURE_DSP); define {P}_USE_DSP as 0 to use the portable C. */\n"
            f"#ifndef {P}_USE_DSP\n#if defined(__ARM_FEATURE_DSP) && __ARM_FEATURE_DSP\n"
            f"#define {P}_USE_DSP 1\n#else\n#define {P}_USE_DSP 0\n#endif\n#endif\n\n")


def _shape(shape: tuple[int, ...]) -> str:
    return "x".join(map(str, shape))


def _describe(layer: QuantLayer) -> str:
    """One line per step for comments, e.g. ``1:c8k3 conv + relu: 16x16x3 -> 16x16x8``."""
    op = layer.op
    extra = " + relu" if layer.relu else ""
    return f"{op.name} {layer.kind}{extra}: {_shape(op.in_shape)} -> {_shape(op.out_shape)}"


def generate_c(qnet: QuantizedNetwork, prefix: str = "tc", classes=None,
               macs: int | None = None, style: str = "fast") -> CCode:
    """The C source and header for ``qnet``.

    Parameters
    ----------
    qnet : QuantizedNetwork
    prefix : str
        Prefix of every generated symbol and of the file names
        (:func:`check_prefix`); macros use its upper-case form.
    classes : sequence of str, optional
        Class names for the header comment (index order).
    macs : int, optional
        MACs per image, for the header comment.
    style : {"fast", "plain"}
        The kernels: ``fast`` (:mod:`tinyconv.export.c_fast`, the default, with
        an optional DSP path) or ``plain`` loop nests (:mod:`tinyconv.export.c_kernels`,
        kept as a readable reference and for speed comparisons).

    Returns
    -------
    CCode
    """
    p = check_prefix(prefix)
    P = p.upper()
    h, w, c = qnet.input_shape
    k = qnet.n_classes
    classes = list(classes) if classes is not None else [str(i) for i in range(k)]
    if len(classes) != k:
        raise InputError(f"{len(classes)} class names given for a network of {k} classes; "
                         "give one name per class")

    arrays: list[CArray] = []
    blocks: list[str] = []

    def add(name: str, ctype: str, values: np.ndarray) -> None:
        arr = CArray(name, ctype, int(np.asarray(values).size))
        arrays.append(arr)
        blocks.append(_array(arr, values, f" {P}_ALIGN" if ctype == "int8_t" else ""))

    if style not in STYLES:
        raise InputError(f"kernel style {style!r} is not one of {', '.join(STYLES)}")
    add(f"{p}_input_table", "int8_t", qnet.table)  # [256][c]: table[p * c + ch]
    for layer in qnet.layers:
        if layer.weights is None:
            continue
        base = f"{p}_l{layer.index}"
        c_layout.check_multipliers(layer)
        add(f"{base}_w", "int8_t", c_layout.weights(layer, style))
        if style == "fast":  # one record a channel: bias, multiplier, nh, code
            add(f"{base}_rec", "int32_t", c_layout.channel_records(layer))
        else:
            add(f"{base}_bias", "int32_t", c_layout.bias(layer, style))
            add(f"{base}_mult", "int32_t", layer.multiplier)
            add(f"{base}_shift", "int32_t", layer.shift)
    flash = sum(a.nbytes for a in arrays)
    plan = plan_buffer(qnet, style)

    last_dst = plan.steps[-1].dst
    body = [f"int32_t {p}_classify(const uint8_t *image, int8_t *logits)\n{{\n",
            "    int32_t i, best;\n",
            f"    /* input: raw pixel -> quantised normalised value, buffer[0 .. {h * w * c}) */\n",
            *_input_loop(p, h * w, c)]
    body.insert(2, f"    {P}_MARK(0);\n")
    last = len(qnet.layers) - 1
    def ptr(offset: int) -> str:  # C: an address in the static buffer
        return f"{p}_activations + {offset}"

    for j, (layer, at) in enumerate(zip(qnet.layers, plan.steps)):
        body.append(f"    /* {_comment_safe(_describe(layer))} */\n")
        body.append(f"    {P}_MARK({j + 1});\n")
        emitter = emitter_of("head" if j == last else layer.kind)
        body.append(emitter.call(layer, p, ptr(at.src), ptr(at.dst), ptr(at.scratch), style,
                                 "" if at.skip is None else ptr(at.skip)))
    body += [f"    {P}_MARK({last + 2});\n",
             f"    memcpy(logits, {p}_activations + {last_dst}, {k});\n",
             "    return best;\n}\n"]

    info = _info_comment(qnet, classes, flash, plan.size, macs)
    source = (info + "\n#include <stdint.h>\n#include <string.h>\n\n"
              f'#include "{p}.h"\n\n'
              f"/* a build may define {P}_MARK(step) to time each step */\n"
              f"#ifndef {P}_MARK\n#define {P}_MARK(step) ((void)0)\n#endif\n\n"
              + _align_macro(P) + "\n".join(blocks) + "\n"
              f"/* activations: each tensor at the offset planned from the live ranges */\n"
              f"static int8_t {p}_activations[{P}_ACTIVATION_BYTES] {P}_ALIGN;\n"
              + _kernels([layer.kind for layer in qnet.layers[:-1]] + ["head"], p, style)
              + "\n" + "".join(body))
    header = (info + f"\n#ifndef {P}_H\n#define {P}_H\n\n#include <stdint.h>\n\n"
              f"#define {P}_INPUT_H {h}\n#define {P}_INPUT_W {w}\n#define {P}_INPUT_C {c}\n"
              f"#define {P}_INPUT_BYTES {h * w * c}\n#define {P}_CLASSES {k}\n"
              f"#define {P}_ACTIVATION_BYTES {plan.size}\n#define {P}_FLASH_BYTES {flash}\n"
              f"#define {P}_LOGIT_ZERO_POINT {qnet.logits_zp}\n\n"
              + (_dsp_switch(P) if style == "fast" else "")
              + f"/* Classify one image: {P}_INPUT_BYTES uint8 values in row-major HWC order,\n"
              f"   already in the network's input size and colour mode. Writes {P}_CLASSES\n"
              "   int8 logits and returns the class: the arg-max of the last layer's outputs\n"
              "   at 8 more fractional bits than the logits (the first of equal values).\n"
              "   Uses one static activation buffer: not re-entrant. */\n"
              f"int32_t {p}_classify(const uint8_t *image, int8_t *logits);\n\n#endif\n")
    return CCode(p, source, header, tuple(arrays), plan.size, flash)


def _info_comment(qnet: QuantizedNetwork, classes, flash: int, buffer: int,
                  macs: int | None) -> str:
    h, w, c = qnet.input_shape
    lines = [f"int8 classifier generated by tinyconv {__version__}",
             f"architecture: {qnet.arch}",
             f"input: {h} x {w} x {c} uint8, row-major HWC, in the network's colour mode",
             f"classes ({qnet.n_classes}): "
             + ", ".join(f"{i} {name}" for i, name in enumerate(classes)),
             f"flash (constant arrays): {flash} bytes",
             f"buffer (activations, static): {buffer} bytes"]
    if macs is not None:
        lines.append(f"multiply-accumulates per image: {macs}")
    lines += [f"calibration: {qnet.calibration} over {qnet.n_calib} images; weights rounded "
              f"with {qnet.rounding}",
              f"logit real value = {qnet.logits_scale:.9g} * (q - ({qnet.logits_zp}))"]
    lines += ["steps:"] + [f"  {_describe(layer)}" for layer in qnet.layers]
    return "/*\n" + "".join(f" * {_comment_safe(line)}\n" for line in lines) + " */\n"
