"""A general search space sized for the user's data, as a commented space file.

``tinyconv search`` without ``--space`` searches this space, and ``tinyconv
space DATA --write FILE`` writes it out as a starting point to edit. It is
built from what the data and the budgets say, by fixed rules:

* **input sizes**: the data's own size, shrunk by halves until the longer side
  is at most :data:`MAX_SIDE` and until the smallest convolutional candidate
  at that size (one stage of :data:`NARROWEST` filters) fits the peak-memory
  and MAC budgets, never below :data:`MIN_SIDE`; and half of it when its
  shorter side stays at least :data:`MIN_SIDE`;
* **colour modes**: ``rgb`` and ``gray`` for colour images, ``gray`` alone for
  grey ones;
* **stages**: 0 (softmax regression on the pixels, the baseline) up to three
  pooling stages, as many as keep the largest input's map at least 2 pixels a
  side;
* **widths**: the plans of :data:`PLANS`; with a budget on parameters,
  flash, peak memory or MACs, also the narrower :data:`NARROW_PLAN`;
* standard and depthwise-separable 3 x 3 convolutions, max pooling, global
  pooling and flatten heads;
* **budgets**: those given (on the command line), written into ``[budget]``
  and ``[device]``; the others are left as comments to fill in.

The same data and budgets always give the same text, so a search without
``--space`` resumes like any other.
"""

from __future__ import annotations

from dataclasses import dataclass

from search.budget import Budget

MAX_SIDE = 64          # the longest input side the general space starts from
MIN_SIDE = 8           # no input side below this
NARROWEST = 8          # filters of the smallest convolutional candidate (for sizing)
PLANS = ((8, 16, 32), (16, 32, 64))
NARROW_PLAN = (4, 8, 16)
MAX_STAGES = 3
COMMENT_AT = 34        # the column the file's comments start at


@dataclass(frozen=True)
class DataShape:
    """What the space is sized from: the stored image size, colour, classes, images."""

    h: int
    w: int
    channels: int
    n_classes: int
    n_images: int
    source: str = ""

    @property
    def kind(self) -> str:
        return "grey" if self.channels == 1 else "colour"

    def describe(self) -> str:
        """``'32x32 colour images, 8 classes, 640 images'``."""
        return (f"{self.h}x{self.w} {self.kind} images, {self.n_classes} classes, "
                f"{self.n_images:,} images")


def _halve(h: int, w: int) -> tuple[int, int]:
    return max(MIN_SIDE, h // 2), max(MIN_SIDE, w // 2)


def _fits(h: int, w: int, mode: str, budget: Budget, n_classes: int) -> bool:
    """Whether one narrow stage at this size fits the peak-memory and MAC budgets."""
    from tinyconv.arch import parse
    from tinyconv.cost import totals_of
    t = totals_of(parse(f"{h}x{w}{mode}/c{NARROWEST}k3-p2-gap"), n_classes)
    return ((budget.max_peak_kb is None or t.peak_int8_bytes <= budget.max_peak_kb * 1024)
            and (budget.max_macs is None or t.macs <= budget.max_macs))


def input_sizes(shape: DataShape, budget: Budget) -> list[tuple[int, int]]:
    """The largest input and, when it stays large enough, half of it (see the notes)."""
    h, w = shape.h, shape.w
    while max(h, w) > MAX_SIDE and min(h, w) > MIN_SIDE:
        h, w = _halve(h, w)
    while min(h, w) > MIN_SIDE and not _fits(h, w, "gray", budget, shape.n_classes):
        h, w = _halve(h, w)
    sizes = [(h, w)]
    if min(h, w) // 2 >= MIN_SIDE:
        sizes.append((h // 2, w // 2))
    return sizes


def stage_count(h: int, w: int) -> int:
    """Pooling stages (by 2) that keep a map of at least 2 pixels a side, at most 3."""
    n = 0
    while n < MAX_STAGES and min(h, w) // 2 ** (n + 1) >= 2:
        n += 1
    return n


def _size_text(h: int, w: int) -> str:
    return str(h) if h == w else f'"{h}x{w}"'


def _budget_lines(budget: Budget) -> list[str]:
    """The [budget] and [device] tables: set values written, the others as comments."""
    rows = (("max_params", "trained parameters", "50000"),
            ("max_macs", "multiply-accumulates per image", "1000000"),
            ("max_peak_kb", "int8 peak activation memory, KB (1,024 bytes)", "32"),
            ("max_flash_kb", "int8 weights and tables, KB", "256"),
            ("max_ms", "milliseconds per image on the [device] (cost model)", "50"))
    lines = ["", _note("[budget]", "a limit per key; a key left out has none")]
    for key, what, example in rows:
        value = getattr(budget, key)
        if value is None:
            lines.append(_note(f"# {key} = {example}", what))
        else:
            shown = f"{value:g}" if isinstance(value, float) else str(value)
            lines.append(_note(f"{key} = {shown}", what))
    lines += ["", _note("[device]", "the part the time is for (needed by max_ms)")]
    core = f'core = "{budget.core or "cortex-m4"}"'
    clock = f"clock_mhz = {budget.clock_mhz or 80:g}"
    lines += [_note(core if budget.core else "# " + core,
                    "cortex-m3, cortex-m4, cortex-m7, cortex-m33"),
              _note(clock if budget.clock_mhz else "# " + clock,
                    "default: the core's assumed clock")]
    return lines


def _note(text: str, comment: str) -> str:
    """A line of the file with its comment in the comment column."""
    return f"{text.ljust(COMMENT_AT - 1)} # {comment}"


def starter_text(shape: DataShape, budget: Budget | None = None) -> str:
    """The general space for data of ``shape`` under ``budget``, as a commented TOML text."""
    budget = budget or Budget()
    sizes = input_sizes(shape, budget)
    n = stage_count(*sizes[0])
    modes = ["rgb", "gray"] if shape.channels == 3 else ["gray"]
    narrow = any(getattr(budget, k) is not None
                 for k in ("max_params", "max_flash_kb", "max_peak_kb", "max_macs"))
    plans = ([NARROW_PLAN] if narrow else []) + list(PLANS)
    widths = ", ".join("[" + ", ".join(str(f) for f in p[:n]) + "]" for p in plans)
    counts = ", ".join(str(c) for c in range(n + 1))
    size_note = ("the data's size (at most 64 a side), and half of it" if len(sizes) > 1
                 else "the data's size")
    mode_note = ("colour, and grey (a third of the input's memory)" if len(modes) > 1
                 else "the images are grey")
    lines = [
        "# A starting search space, written by tinyconv for",
        f"#   {shape.source or 'the data'}: {shape.describe()}.",
        "# Edit it to taste, then: tinyconv search DATA --space THIS_FILE --out RUN_FOLDER",
        "# Every key is a list of choices unless its comment says otherwise.",
        _note("format = 1", "one value: the version of this format"),
        f'description = "general space for {shape.h}x{shape.w} {shape.kind} images, '
        f'{shape.n_classes} classes"',
        "",
        "[input]",
        _note(f"sizes = [{', '.join(_size_text(h, w) for h, w in sizes)}]", size_note),
        _note("modes = [" + ", ".join(f'"{m}"' for m in modes) + "]", mode_note),
        "",
        "[stages]",
        _note(f"count = [{counts}]", "conv stages; 0 = softmax regression on the pixels"),
    ]
    if n:
        lines += [
            "# filters per stage, as whole plans: a candidate of n stages uses a plan's first n",
            f"widths = [{widths}]",
            _note("kernel = [3]", "odd sizes"),
            _note('conv = ["standard", "depthwise"]', "c{f}k3, or dw3-c{f}k1 (fewer MACs)"),
            _note('pool = ["max"]', "halve the map after each stage"),
            "",
            "[head]",
            _note('kind = ["gap", "flatten"]', "global average pooling, or every value"),
            _note("hidden = [0]", "add e.g. 32 for a hidden dense layer"),
            "",
            "[options]",
            _note("batch_norm = [false]", "true: bn after every convolution"),
            _note("dropout = [0]", "percent before the classifier, e.g. [0, 20]"),
        ]
    lines += _budget_lines(budget)
    return "\n".join(lines) + "\n"


def data_shape(dataset, source: str = "") -> DataShape:
    """The :class:`DataShape` of a :class:`tinyconv.data.Dataset`."""
    h, w, c = dataset.image_shape
    return DataShape(h, w, c, dataset.n_classes, dataset.n, source or dataset.source)
