"""Training recipes: the training choices a search varies beside the architecture.

A *recipe* is the augmentation, the copies of each image an epoch passes
over, the learning rate, weight decay and learning-rate schedule one
candidate is trained with; a *candidate* of a search is an
architecture plus a recipe. The space file's ``[training]`` table lists
choices for each, like the other tables (every key optional)::

    [training]
    augment = ["none", "shift2+mirror+upend+turn"]   # tinyconv.augment's text form
    copies = [1, 8]                                  # copies of each image per epoch
    lr = [0.005, 0.01]                               # learning rates (> 0)
    weight_decay = [0, 1e-4]                         # decoupled decay of weights (>= 0)
    schedule = ["constant", "cosine"]                # constant | step | cosine

A key left out takes the run's training setting (the command line's
``--augment``, ``--copies``, ``--lr``, ``--weight-decay``, ``--schedule``,
else the search's default); a key given on the command line replaces the
file's choices by that one value, as the command line's budgets replace the
file's. The recipes are every combination, in the order augment, copies, lr,
weight_decay, schedule (the first slowest), each given once.

The text form of a recipe (ours) is five ``key=value`` words in a fixed
order, numbers in Python's shortest round-trip form with a trailing ``.0``
dropped::

    aug=shift2+mirror+upend+turn copies=8 lr=0.005 wd=0 sched=constant

A run with one recipe keys its candidates by the architecture text alone (as
before recipes existed); a run with several keys each candidate as
``"{architecture} {recipe}"``. :func:`split_key` takes a key apart again; the
run's settings keep the list of recipe texts (``recipes``), so the recipe of
any key is known (:func:`recipe_of`). Recipes of one architecture share its
unit seeds (the runner seeds a unit by the architecture), so they start from
the same weights and see the same batches: their difference on a fold is the
recipe's.
"""

from __future__ import annotations

import itertools
import math
import numbers
from dataclasses import dataclass, fields
from typing import Any, Mapping

from tinyconv.errors import InputError

#: TrainConfig fields a recipe sets, in the order recipes are enumerated.
RECIPE_KEYS = ("augment", "copies", "lr", "weight_decay", "schedule")
#: The short names of the text form, in its order.
_WORDS = (("aug", "augment"), ("copies", "copies"), ("lr", "lr"), ("wd", "weight_decay"),
          ("sched", "schedule"))


class RecipeError(InputError):
    """A recipe text or value that cannot be used."""


def _number(x: float) -> str:
    """Shortest round-trip text of a float, without a trailing ``.0`` (0.0 -> ``0``)."""
    text = repr(float(x))
    return text[:-2] if text.endswith(".0") else text


@dataclass(frozen=True)
class Recipe:
    """How one candidate is trained: augmentation, copies, learning rate, weight decay,
    schedule.

    Values are checked (and the augmentation made canonical) as ``TrainConfig``
    checks them.
    """

    augment: str
    copies: int
    lr: float
    weight_decay: float
    schedule: str

    def __post_init__(self) -> None:
        from tinyconv.train_config import TrainConfig
        checked = TrainConfig(epochs=1, **{f.name: getattr(self, f.name) for f in fields(self)})
        for f in fields(self):
            object.__setattr__(self, f.name, getattr(checked, f.name))

    def __str__(self) -> str:
        values = {"augment": self.augment, "copies": str(self.copies), "lr": _number(self.lr),
                  "weight_decay": _number(self.weight_decay), "schedule": self.schedule}
        return " ".join(f"{word}={values[key]}" for word, key in _WORDS)

    def settings(self) -> dict[str, Any]:
        """The ``TrainConfig`` fields this recipe sets."""
        return {key: getattr(self, key) for key in RECIPE_KEYS}


def parse_recipe(text: str) -> Recipe:
    """The :class:`Recipe` of a text in the form ``aug=... lr=... wd=... sched=...``.

    Raises
    ------
    RecipeError
        Naming the word that is wrong and the form expected.
    """
    form = ("aug=AUGMENT copies=N lr=RATE wd=DECAY sched=SCHEDULE, e.g. "
            "aug=none copies=1 lr=0.005 wd=0 sched=constant")
    words = str(text).split()
    if len(words) != len(_WORDS):
        raise RecipeError(f"recipe {text!r} has {len(words)} words; write {form}")
    values: dict[str, Any] = {}
    for word, (name, key) in zip(words, _WORDS):
        given, eq, value = word.partition("=")
        if given != name or not eq or not value:
            raise RecipeError(f"recipe {text!r}: {word!r} should be {name}=...; write {form}")
        if key in ("copies", "lr", "weight_decay"):
            try:
                values[key] = int(value) if key == "copies" else float(value)
            except ValueError:
                raise RecipeError(f"recipe {text!r}: {name}={value} is not a number; "
                                  f"write {form}") from None
        else:
            values[key] = value
    return Recipe(**values)


@dataclass(frozen=True)
class TrainingChoices:
    """The ``[training]`` table of a space file: the choices of each key (empty: not given)."""

    augment: tuple[str, ...] = ()
    copies: tuple[int, ...] = ()
    lr: tuple[float, ...] = ()
    weight_decay: tuple[float, ...] = ()
    schedule: tuple[str, ...] = ()

    def size_bound(self) -> int:
        """How many recipes the table gives at most (1 for an empty table)."""
        return math.prod(max(len(getattr(self, k)), 1) for k in RECIPE_KEYS)


def read_training(table: dict, reader) -> TrainingChoices:
    """Check a space file's ``[training]`` table with the space reader's ``choices``.

    ``reader`` is the space file's reader (``search.space_read._Reader``), so the
    errors name the file, the key, the value and the rule like the other tables'.
    """
    from tinyconv.augment import parse_augment
    from tinyconv.train_config import MAX_COPIES, SCHEDULES

    def augment_ok(a: Any) -> bool:
        try:
            parse_augment(a)
        except InputError:
            return False
        return isinstance(a, str)

    def real(low: float, strict: bool):
        return lambda v: (isinstance(v, numbers.Real) and not isinstance(v, bool)
                          and math.isfinite(v) and (v > low if strict else v >= low))

    out = {}
    if "augment" in table:
        given = reader.choices(table["augment"], "training.augment", augment_ok,
                               "an augmentation such as \"none\" or \"shift2+mirror+turn\" "
                               "(see tinyconv/augment.py)")
        out["augment"] = tuple(dict.fromkeys(str(parse_augment(a)) for a in given))
    if "copies" in table:
        out["copies"] = reader.choices(
            table["copies"], "training.copies",
            lambda v: isinstance(v, int) and not isinstance(v, bool) and 1 <= v <= MAX_COPIES,
            f"a whole number of copies from 1 to {MAX_COPIES}")
    if "lr" in table:
        out["lr"] = tuple(float(v) for v in reader.choices(
            table["lr"], "training.lr", real(0.0, True), "a learning rate > 0, e.g. 0.003"))
    if "weight_decay" in table:
        out["weight_decay"] = tuple(float(v) for v in reader.choices(
            table["weight_decay"], "training.weight_decay", real(0.0, False),
            "a weight decay >= 0, e.g. 1e-4"))
    if "schedule" in table:
        out["schedule"] = reader.choices(table["schedule"], "training.schedule",
                                         lambda s: s in SCHEDULES,
                                         f"one of {', '.join(SCHEDULES)}")
    return TrainingChoices(**out)


def make_recipes(choices: TrainingChoices, overrides: Mapping[str, Any],
                 defaults: Mapping[str, Any]) -> tuple[Recipe, ...]:
    """Every recipe of a run, in the documented order, each once.

    Parameters
    ----------
    choices : TrainingChoices
        The space file's ``[training]`` table.
    overrides : mapping
        Training settings given on the command line: one choice each, over the file's.
    defaults : mapping
        The run's training settings, for keys neither gives.
    """
    lists = []
    for key in RECIPE_KEYS:
        if key in overrides and overrides[key] is not None:
            lists.append((overrides[key],))
        elif getattr(choices, key):
            lists.append(getattr(choices, key))
        else:
            lists.append((defaults[key],))
    recipes = (Recipe(*combo) for combo in itertools.product(*lists))
    return tuple(dict.fromkeys(recipes))


def candidate_key(arch: str, recipe: Recipe | str, several: bool) -> str:
    """The key of a candidate: the architecture text, followed by the recipe when the
    run has several."""
    return f"{arch} {recipe}" if several else str(arch)


def split_key(key: str) -> tuple[str, str | None]:
    """(architecture text, recipe text or None) of a candidate key."""
    arch, _, recipe = str(key).partition(" ")
    return arch, (recipe or None)


def arch_of(key: str) -> str:
    """The architecture text of a candidate key."""
    return split_key(key)[0]


def _stored(settings) -> tuple[Any, dict[str, Any]]:
    """(recipes, training) of a run's ``SearchSettings`` or of their stored dict form."""
    if isinstance(settings, Mapping):
        return settings.get("recipes"), dict(settings.get("training") or {})
    return settings.recipes, dict(settings.training or {})


def run_recipes(settings) -> tuple[str, ...]:
    """The recipe texts of a run, from its settings (``SearchSettings`` or stored dict).

    Settings without a list (a run stored before recipes existed) have one
    recipe: their training settings, with ``TrainConfig``'s defaults for
    what they leave out, as their units were trained.
    """
    listed, training = _stored(settings)
    if listed:
        return tuple(listed)
    from tinyconv.train_config import TrainConfig
    t = {**TrainConfig(epochs=1).__dict__, **training}
    return (str(Recipe(**{k: t[k] for k in RECIPE_KEYS})),)


def recipe_of(settings, key: str) -> str:
    """The recipe text a run trains candidate ``key`` with."""
    return split_key(key)[1] or run_recipes(settings)[0]


def training_for(settings, key: str) -> dict[str, Any]:
    """The ``TrainConfig`` fields (other than epochs and seed) of candidate ``key``:
    the run's training settings with its recipe over them."""
    return {**_stored(settings)[1],
            **parse_recipe(recipe_of(settings, key)).settings()}
