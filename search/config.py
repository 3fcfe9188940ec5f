"""The settings of one search, as stored in its run folder, and their checks.

:class:`SearchSettings` holds everything that decides *which* units run and
*what* they compute: data, space, folds, seed, the schedule, device budgets and
training settings. Two runs with equal settings and equal data compute
bit-identical units, whatever the number of workers; a run folder therefore
refuses settings that differ from the ones it was started with
(:func:`differences`). The time and epoch budgets are the exception: they
only say how much of the same fixed plan to carry out, so a resumed run may
raise (or lower) them.
"""

from __future__ import annotations

import math
import re
from dataclasses import asdict, dataclass, field
from typing import Any

from tinyconv.checks import whole_number
from tinyconv.errors import InputError

FORMAT = 1
RANK_ORDERS = ("per_param", "accuracy")

# The defaults of a search, in one place: SearchSettings, SearchRequest
# (search.session), the command line and the demo read them from here.
FOLDS = 3
SEED = 0
ETA = 3
TOP_EPOCHS = 9
BASE_EPOCHS = 1
RANK_BY = "per_param"
SIMPLEST_BY = "params"
#: Training settings of every unit unless told otherwise (TrainConfig fields); the
#: recipe keys among them (search.recipes.RECIPE_KEYS) are the default recipe.
#: Chosen by measurement (benchmarks/recipe_study.py, tables in the README): at the
#: demo's 27 epochs a constant rate beat the step and cosine schedules on the tiles,
#: and batches of 16 at 0.005 beat batches of 32 at every rate tried.
DEFAULT_TRAINING = {"batch_size": 16, "optimizer": "adam", "lr": 0.005, "momentum": 0.9,
                    "weight_decay": 0.0, "decay": "decoupled", "schedule": "constant",
                    "label_smoothing": 0.0, "augment": "none", "copies": 1}
# Keys whose change does not alter any unit, only how far the plan is followed or
# how the pick is chosen from the same units: a resumed run may change them.
EXTENDABLE = ("budget_cpu_s", "budget_epochs", "simplest_by")
# Keys kept for the record but not compared (the data is compared by fingerprint,
# the space by its text).
RECORD_ONLY = ("data", "space_source", "skip_bad")

_DURATION = re.compile(r"(?:(\d+(?:\.\d+)?)h)?(?:(\d+(?:\.\d+)?)m)?(?:(\d+(?:\.\d+)?)s?)?")


def parse_duration(text: str) -> float:
    """Seconds in ``90s``, ``20m``, ``1h``, ``1h30m``, ``2.5m`` or a bare number.

    Raises
    ------
    InputError
        For anything else, showing the value and the accepted forms.
    """
    value = str(text).strip().lower()
    m = _DURATION.fullmatch(value)
    if not value or not m or not any(m.groups()):
        raise InputError(f"CPU budget {text!r} is not a duration; write e.g. 90s, 20m, 1h "
                         "or 1h30m")
    h, mins, s = (float(g) if g else 0.0 for g in m.groups())
    seconds = 3600 * h + 60 * mins + s
    if not seconds > 0:
        raise InputError(f"CPU budget {text!r} must be more than zero seconds")
    return seconds


def format_duration(seconds: float) -> str:
    """A short human form: ``45s``, ``12m 05s``, ``1h 02m``."""
    seconds = max(0.0, float(seconds))
    if seconds < 60:
        return f"{seconds:.0f}s" if seconds >= 10 else f"{seconds:.1f}s"
    if seconds < 3600:
        return f"{int(seconds // 60)}m {int(seconds % 60):02d}s"
    return f"{int(seconds // 3600)}h {int(seconds % 3600 // 60):02d}m"


@dataclass(frozen=True)
class SearchSettings:
    """What one search computes (see the module notes).

    Attributes
    ----------
    data : str
        The data spec given (folder, ``.npz``, ``builtin:...``); for the record.
    fingerprint : str
        ``tinyconv.data.fingerprint`` of the data set: the data's identity.
    classes : tuple of str
    n_images : int
    space : str
        The text of the space file.
    space_source : str
    folds : int
        ``k`` of the stratified k-fold cross-validation (>= 2).
    seed : int
        The run seed; every unit's seed derives from it.
    eta : int
        Halving rate (>= 2).
    top_epochs : int
        ``R``: epochs of the final rung (>= 1).
    base_epochs : int
        The fewest epochs of any rung (1 .. top_epochs).
    full : bool
        Train every surviving candidate for ``top_epochs`` on every fold.
    max_candidates : int or None
        Seeded subsample of the surviving candidates.
    budget : dict
        Device limits (``max_params``, ``max_macs``, ``max_peak_kb``,
        ``max_flash_kb``; ``None`` for no limit).
    budget_cpu_s : float or None
        Total CPU seconds the units may use (summed over workers).
    budget_epochs : int or None
        Total training epochs (summed over units, as planned).
    training : dict
        ``TrainConfig`` fields other than ``epochs``, ``seed`` and those a
        recipe sets: the settings every candidate shares.
    int8 : bool
        Units of the last rung also report the held-out accuracy of their int8
        quantised form.
    skip_bad : bool
        Unreadable images were skipped when the data was read (the report and
        the export read it the same way).
    recipes : tuple of str
        The run's training recipes, as texts (:mod:`search.recipes`); with more
        than one, each candidate key carries its recipe.
    simplest_by : str
        What the one-standard-error pick minimises: params, macs, ram, flash or
        ms (``search.rank.SIMPLEST``).
    """

    data: str
    fingerprint: str
    classes: tuple[str, ...]
    n_images: int
    space: str
    space_source: str = ""
    folds: int = FOLDS
    seed: int = SEED
    eta: int = ETA
    top_epochs: int = TOP_EPOCHS
    full: bool = False
    base_epochs: int = BASE_EPOCHS
    max_candidates: int | None = None
    budget: dict = field(default_factory=dict)
    budget_cpu_s: float | None = None
    budget_epochs: int | None = None
    training: dict = field(default_factory=dict)
    int8: bool = False
    skip_bad: bool = False
    recipes: tuple[str, ...] = ()
    simplest_by: str = SIMPLEST_BY

    def __post_init__(self) -> None:
        whole_number(self.folds, "folds", low=2, fix="set --folds")
        whole_number(self.eta, "eta", low=2, fix="set --eta")
        whole_number(self.top_epochs, "top epochs", low=1, fix="set --top-epochs")
        whole_number(self.base_epochs, "base epochs", low=1, fix="set --base-epochs")
        if self.base_epochs > self.top_epochs:
            raise InputError(f"base epochs {self.base_epochs} is more than top epochs "
                             f"{self.top_epochs}; lower --base-epochs or raise --top-epochs")
        whole_number(self.seed, "seed", fix="set --seed")
        if self.max_candidates is not None:
            whole_number(self.max_candidates, "max candidates", low=1, fix="set --max-candidates")
        if self.budget_cpu_s is not None and not (math.isfinite(self.budget_cpu_s)
                                                  and self.budget_cpu_s > 0):
            raise InputError(f"CPU budget must be a positive number of seconds, got "
                             f"{self.budget_cpu_s!r}")
        if self.budget_epochs is not None:
            whole_number(self.budget_epochs, "epoch budget", low=1, fix="set --budget-epochs")

    def as_dict(self) -> dict[str, Any]:
        """Plain data (lists for tuples), as stored; includes the format version."""
        out = asdict(self)
        out["classes"] = list(self.classes)
        out["recipes"] = list(self.recipes)
        out["format"] = FORMAT
        return out

    @property
    def n_classes(self) -> int:
        """``K``, the number of classes of the run's data."""
        return len(self.classes)

    @staticmethod
    def from_dict(data: dict[str, Any]) -> "SearchSettings":
        """The settings from their stored form (:meth:`as_dict`; a key left out takes
        its default, as it did when the run was stored)."""
        values = {k: v for k, v in data.items() if k != "format"}
        values["classes"] = tuple(values["classes"])
        values["recipes"] = tuple(values.get("recipes") or ())
        return SearchSettings(**values)


def _show(value: Any) -> str:
    text = repr(value)
    if isinstance(value, str) and ("\n" in value or len(value) > 40):
        first = value.strip().splitlines()[0] if value.strip() else ""
        return f"a text of {len(value)} characters starting {first[:30]!r}"
    return text if len(text) <= 60 else text[:57] + "..."


def differences(stored: dict[str, Any], now: dict[str, Any]) -> list[str]:
    """What differs between a stored configuration and a new one.

    Keys in ``EXTENDABLE`` and ``RECORD_ONLY`` are not compared. Each item
    reads ``"folds: 5 in the run folder, 3 now"``; nested dicts (budget,
    training) are compared key by key.
    """
    out = []
    keys = sorted(set(stored) | set(now))
    for key in keys:
        if key in EXTENDABLE or key in RECORD_ONLY:
            continue
        a, b = stored.get(key), now.get(key)
        if isinstance(a, dict) and isinstance(b, dict):
            for sub in sorted(set(a) | set(b)):
                if a.get(sub) != b.get(sub):
                    out.append(f"{key}.{sub}: {_show(a.get(sub))} in the run folder, "
                               f"{_show(b.get(sub))} now")
        elif a != b:
            name = "data fingerprint" if key == "fingerprint" else key
            if key == "fingerprint":
                out.append(f"{name}: {a} (data {stored.get('data')!r}) in the run folder, "
                           f"{b} (data {now.get('data')!r}) now: it is other data")
            else:
                out.append(f"{name}: {_show(a)} in the run folder, {_show(b)} now")
    return out
