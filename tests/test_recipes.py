"""Training recipes: text form, the space file's [training] table, command-line overrides."""

from __future__ import annotations

import pytest

from search.recipes import (Recipe, RecipeError, TrainingChoices, candidate_key, make_recipes,
                            parse_recipe, recipe_of, run_recipes, split_key, training_for)
from search.space import SpaceError, load_space
from tinyconv.errors import InputError

DEFAULTS = {"augment": "none", "copies": 1, "lr": 0.003, "weight_decay": 0.0,
            "schedule": "cosine"}
HEAD = "[input]\nsizes = [8]\nmodes = [\"gray\"]\n"


def test_text_form_round_trips():
    """A recipe's text parses back to an equal recipe; numbers keep every digit."""
    r = Recipe("shift2+mirror", 8, 0.0031415926535, 1e-4, "step")
    assert str(r) == "aug=mirror+shift2 copies=8 lr=0.0031415926535 wd=0.0001 sched=step"
    assert parse_recipe(str(r)) == r
    assert str(Recipe("none", 1, 1.0, 0.0, "constant")) == \
        "aug=none copies=1 lr=1 wd=0 sched=constant"


@pytest.mark.parametrize("text, message", [
    ("aug=none lr=0.003", r"has 2 words; write aug=AUGMENT copies=N"),
    ("aug=none copies=1 rate=0.003 wd=0 sched=cosine", r"'rate=0.003' should be lr=\.\.\."),
    ("aug=none copies=1 lr=fast wd=0 sched=cosine", r"lr=fast is not a number"),
    ("aug=none copies=1 lr=-1 wd=0 sched=cosine", r"learning rate must be a finite number > 0"),
    ("aug=spin copies=1 lr=0.1 wd=0 sched=cosine", r"'spin' is not a transform"),
])
def test_bad_recipe_texts_are_refused(text, message):
    """Wrong word counts, names, numbers and values are refused with the form expected."""
    with pytest.raises(InputError, match=message):
        parse_recipe(text)
    assert issubclass(RecipeError, InputError)


def test_training_table_gives_choices_in_file_order():
    """[training] choices are read, augmentation texts made canonical, repeats dropped."""
    space = load_space(HEAD + "[training]\naugment = [\"none\", \"mirror+turn\", \"turn+mirror\"]\n"
                       "copies = [1, 4]\nlr = [0.01, 3e-3]\nweight_decay = [0, 1e-4]\n"
                       "schedule = [\"constant\"]\n")
    t = space.training
    assert t == TrainingChoices(("none", "turn+mirror"), (1, 4), (0.01, 0.003), (0.0, 1e-4),
                                ("constant",))
    assert t.size_bound() == 16
    assert load_space(HEAD).training == TrainingChoices()


@pytest.mark.parametrize("table, message", [
    ("lr = 0.01", r"training.lr = 0.01: must be a non-empty list"),
    ("lr = [0]", r"training.lr = \[0\]: 0 is not a learning rate > 0"),
    ("weight_decay = [-1]", r"-1 is not a weight decay >= 0"),
    ("schedule = [\"linear\"]", r"'linear' is not one of constant, step, cosine"),
    ("augment = [\"spin\"]", r"'spin' is not an augmentation such as"),
    ("copies = [0]", r"0 is not a whole number of copies from 1 to 64"),
    ("epochs = [9]", r"unknown key training.epochs; known keys in \[training\]: augment, "
                     r"copies, lr, weight_decay, schedule"),
])
def test_bad_training_tables_are_refused(table, message):
    """A bad [training] value names the file, the key, the value and the rule."""
    with pytest.raises(SpaceError, match=message):
        load_space(HEAD + "[training]\n" + table + "\n")


def test_turns_need_square_inputs_in_the_space():
    """A turn choice with an oblong input is refused, naming both."""
    with pytest.raises(SpaceError, match=r"'turn' turns images by quarter turns, which needs "
                                         r"square inputs, but the space has 8x6gray"):
        load_space("[input]\nsizes = [8, \"8x6\"]\nmodes = [\"gray\"]\n"
                   "[training]\naugment = [\"none\", \"turn\"]\n")


def test_recipes_combine_choices_and_command_line_overrides():
    """Recipes are the product in key order; a command-line value replaces the file's list."""
    choices = TrainingChoices(augment=("none", "mirror"), lr=(0.01, 0.03))
    got = make_recipes(choices, {}, DEFAULTS)
    assert [(r.augment, r.lr) for r in got] == [("none", 0.01), ("none", 0.03),
                                                ("mirror", 0.01), ("mirror", 0.03)]
    assert all(r.schedule == "cosine" and r.copies == 1 for r in got)
    one = make_recipes(choices, {"lr": 0.1, "augment": "turn"}, DEFAULTS)
    assert [str(r) for r in one] == ["aug=turn copies=1 lr=0.1 wd=0 sched=cosine"]
    assert make_recipes(TrainingChoices(), {}, DEFAULTS) == (Recipe(**DEFAULTS),)


def test_keys_and_settings_lookups():
    """Keys join architecture and recipe only when there are several; lookups undo them."""
    r = Recipe(**DEFAULTS)
    assert candidate_key("8x8gray/c2k3", r, False) == "8x8gray/c2k3"
    key = candidate_key("8x8gray/c2k3", r, True)
    assert split_key(key) == ("8x8gray/c2k3", str(r)) and split_key("8x8gray") == ("8x8gray", None)
    settings = {"training": {"batch_size": 16, "optimizer": "adam"},
                "recipes": [str(r), "aug=mirror copies=2 lr=0.1 wd=0 sched=step"]}
    assert recipe_of(settings, "8x8gray/c2k3 aug=mirror copies=2 lr=0.1 wd=0 sched=step") \
        .startswith("aug=mirror")
    assert training_for(settings, key) == {"batch_size": 16, "optimizer": "adam", **DEFAULTS}
    # a run stored before recipes: its training settings are its one recipe
    old = {"training": {"batch_size": 32, "lr": 0.003, "weight_decay": 0.0,
                        "schedule": "cosine"}}
    assert run_recipes(old) == ("aug=none copies=1 lr=0.003 wd=0 sched=cosine",)
    assert training_for(old, "8x8gray")["lr"] == 0.003


def test_cli_refuses_bad_augmentation_before_training(tmp_path, capsys):
    """search --augment with an unknown word, or turns of oblong inputs, exits 2 naming it."""
    from helpers import TINY_DATA
    from tinyconv.cli import main

    space = tmp_path / "space.toml"
    space.write_text("[input]\nsizes = [\"8x6\"]\nmodes = [\"gray\"]\n")
    base = ["search", TINY_DATA, "--space", str(space), "--workers", "0"]
    assert main(base + ["--out", str(tmp_path / "a"), "--augment", "spin"]) == 2
    assert "augment 'spin': 'spin' is not a transform" in capsys.readouterr().err
    assert main(base + ["--out", str(tmp_path / "b"), "--augment", "turn+shift1"]) == 2
    assert "turn needs square images, and these are 8x6; take turn out" in \
        capsys.readouterr().err
    assert not (tmp_path / "b" / "run.sqlite").exists()
