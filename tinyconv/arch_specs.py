"""The architecture as frozen dataclasses: the input, each layer, the whole network.

The text form these print to, and its parser, are in :mod:`tinyconv.arch`; the
JSON form in :mod:`tinyconv.arch_json`; the concrete operations with shapes in
:mod:`tinyconv.ops`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Union

from tinyconv.errors import InputError

MODES = {"rgb": 3, "gray": 1, "ycc": 3, "hsv": 3}
MAX_SIDE = 4096
MAX_WIDTH = 65536
#: joins the colour modes of a stacked input, e.g. ``32x32rgb+hsv``
MODE_JOIN = "+"


class ArchError(InputError):
    """A bad architecture text, or one that does not fit its input.

    Attributes
    ----------
    text : str
        The whole text, when known.
    position : int or None
        1-based position of the offending layer token (0 for the input).
    token : str or None
        The offending token.
    """

    def __init__(self, message: str, *, text: str = "", position: int | None = None,
                 token: str | None = None):
        super().__init__(message)
        self.text = text
        self.position = position
        self.token = token


# ---------------------------------------------------------------- the specs


@dataclass(frozen=True)
class InputSpec:
    """Image size and colour mode the network reads, e.g. ``32x32rgb``.

    ``mode`` may join several colour modes with ``+`` (``"rgb+hsv"``): the
    network then reads the channels of each, stacked in that order (6 here).
    """

    h: int
    w: int
    mode: str = "rgb"

    @property
    def modes(self) -> tuple[str, ...]:
        """The colour modes stacked, in order (one for a plain mode)."""
        return tuple(self.mode.split(MODE_JOIN))

    @property
    def channels(self) -> int:
        return sum(MODES[m] for m in self.modes)

    @property
    def shape(self) -> tuple[int, int, int]:
        """Per-image shape (h, w, c)."""
        return (self.h, self.w, self.channels)

    def __str__(self) -> str:
        return f"{self.h}x{self.w}{self.mode}"


@dataclass(frozen=True)
class Conv:
    """Standard convolution: ``filters`` output channels, square kernel."""

    filters: int
    kernel: int
    stride: int = 1
    valid: bool = False

    def __str__(self) -> str:
        return (f"c{self.filters}k{self.kernel}" + ("s2" if self.stride == 2 else "")
                + ("v" if self.valid else ""))


@dataclass(frozen=True)
class Depthwise:
    """Depthwise convolution: one k x k filter per input channel."""

    kernel: int
    stride: int = 1
    valid: bool = False

    def __str__(self) -> str:
        return f"dw{self.kernel}" + ("s2" if self.stride == 2 else "") + ("v" if self.valid else "")


@dataclass(frozen=True)
class Pool:
    """Max (``kind='max'``) or average (``kind='avg'``) pooling, size = stride."""

    kind: str
    size: int

    def __str__(self) -> str:
        return ("p" if self.kind == "max" else "a") + str(self.size)


@dataclass(frozen=True)
class GlobalPool:
    """Global average pooling: (h, w, c) -> (c,)."""

    def __str__(self) -> str:
        return "gap"


@dataclass(frozen=True)
class Dense:
    """Hidden dense (fully connected) layer of ``units`` outputs."""

    units: int

    def __str__(self) -> str:
        return f"d{self.units}"


@dataclass(frozen=True)
class BatchNorm:
    """Batch normalisation over the last (channel) axis."""

    def __str__(self) -> str:
        return "bn"


@dataclass(frozen=True)
class Dropout:
    """Inverted dropout of ``pct`` percent of activations, training only."""

    pct: int

    @property
    def rate(self) -> float:
        return self.pct / 100.0

    def __str__(self) -> str:
        return f"x{self.pct}"


@dataclass(frozen=True)
class Block:
    """A residual block: ``layers`` run in order and the block's input is added to
    their output, so the two must have the same shape.

    Inside a block the last conv, depthwise or dense layer has no ReLU (nor has
    a batch norm right after it), and the addition has none either: the block
    adds a linear correction to its input, as inverted bottlenecks do (common
    practice). Blocks do not nest.
    """

    layers: tuple["LayerSpec", ...]

    def __str__(self) -> str:
        return "[" + "-".join(str(layer) for layer in self.layers) + "]"


LayerSpec = Union[Conv, Depthwise, Pool, GlobalPool, Dense, BatchNorm, Dropout, Block]


def flat_layers(layers: tuple[LayerSpec, ...]):
    """Every layer spec in order, those inside blocks included (not the blocks)."""
    for layer in layers:
        if isinstance(layer, Block):
            yield from layer.layers
        else:
            yield layer


def token_count(layer: LayerSpec) -> int:
    """Layer tokens ``layer`` takes in the text (a block: one per layer inside)."""
    return len(layer.layers) if isinstance(layer, Block) else 1


@dataclass(frozen=True)
class Arch:
    """A network architecture: input spec and hidden layers (head implicit)."""

    input: InputSpec
    layers: tuple[LayerSpec, ...] = ()

    def __str__(self) -> str:
        if not self.layers:
            return str(self.input)
        return f"{self.input}/" + "-".join(str(layer) for layer in self.layers)

    def with_input(self, spec: InputSpec) -> "Arch":
        """The same layers on another input."""
        return Arch(spec, self.layers)

    # -------- JSON form, for files
    def to_json(self) -> str:
        """A JSON object: ``{"input": {...}, "layers": [{"type": ..., ...}]}``."""
        from tinyconv.arch_json import to_json
        return to_json(self)

    @staticmethod
    def from_json(text: str) -> "Arch":
        """Inverse of :meth:`to_json`; bad JSON or content raises :class:`ArchError`."""
        from tinyconv.arch_json import from_json
        return from_json(text)
