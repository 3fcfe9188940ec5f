"""The general search space sized for the data, and ``tinyconv space`` that writes it out."""

from __future__ import annotations

import re

import pytest

from search.budget import Budget
from search.space import enumerate_space, load_space
from search.starter import DataShape, input_sizes, stage_count, starter_text
from tinyconv.arch import expand
from tinyconv.cli import main


def _inputs(text: str) -> set[str]:
    return {str(a.input) for a in enumerate_space(load_space(text))}


@pytest.mark.parametrize("shape,inputs,stages", [
    (DataShape(32, 32, 3, 8, 640), {"32x32rgb", "32x32gray", "16x16rgb", "16x16gray"}, 3),
    (DataShape(8, 8, 1, 10, 1797), {"8x8gray"}, 2),
    (DataShape(240, 320, 3, 4, 200), {"30x40rgb", "30x40gray", "15x20rgb", "15x20gray"}, 3),
])
def test_the_space_is_sized_from_the_images(shape, inputs, stages):
    """Sizes from the data's (at most 64 a side, and half), grey data stays grey, and as many
    pooling stages as keep the map at least 2 pixels a side (computed: 32 -> 4, 8 -> 2)."""
    text = starter_text(shape)
    assert _inputs(text) == inputs
    deepest = max(enumerate_space(load_space(text)), key=lambda a: len(a.layers))
    assert sum(1 for op in expand(deepest, shape.n_classes) if op.kind == "maxpool") == stages
    assert stage_count(*input_sizes(shape, Budget())[0]) == stages


def test_a_tight_memory_budget_shrinks_the_inputs():
    """With 4 KB of peak memory a 32x32 input cannot hold one 8-filter stage, so the space
    starts at 16x16 (16x16x1 + 16x16x8 int8 = 2,304 bytes, computed)."""
    text = starter_text(DataShape(32, 32, 3, 8, 640), Budget(max_peak_kb=4.0))
    assert _inputs(text) == {"16x16rgb", "16x16gray", "8x8rgb", "8x8gray"}
    assert re.search(r"^max_peak_kb = 4 +# int8 peak", text, re.M)
    assert re.search(r"^# max_params = 50000 +# trained parameters", text, re.M)
    assert "[4, 8, 16]" in text                    # a budget adds the narrow width plan


def test_the_same_data_and_budgets_give_the_same_text():
    """The text is a function of the data's shape and the budgets (so a search resumes)."""
    shape = DataShape(28, 28, 1, 10, 500, "digits/")
    budget = Budget(max_flash_kb=64.0, core="cortex-m4", clock_mhz=80.0)
    assert starter_text(shape, budget) == starter_text(shape, budget)
    assert 'core = "cortex-m4"' in starter_text(shape, budget)
    assert load_space(starter_text(shape, budget)).budget == budget


def test_space_command_writes_a_new_file_and_never_overwrites(tmp_path, capsys):
    """`tinyconv space DATA --write FILE` writes the text and counts it; an existing FILE is
    refused naming it."""
    target = tmp_path / "mine.toml"
    assert main(["space", "builtin:tiles?n=4&size=16", "--write", str(target),
                 "--max-flash-kb", "32"]) == 0
    out = capsys.readouterr().out
    text = target.read_text()
    n = len(enumerate_space(load_space(text)))
    assert out.startswith(f"wrote {target}: {n} candidates, ")
    assert text.startswith("# A starting search space, written by tinyconv for")
    assert "16x16 colour images, 8 classes, 32 images" in text
    assert main(["space", "builtin:tiles?n=4&size=16", "--write", str(target)]) == 2
    assert re.search(r"error: --write .*mine\.toml: the file exists already; give a new file "
                     r"name, or remove it first", capsys.readouterr().err)
    assert target.read_text() == text


def test_search_without_a_space_uses_the_general_one(tmp_path, capsys, monkeypatch):
    """No --space: the general space for the data is searched, stored and named."""
    import tinyconv.commands.search as cmd
    from search.store import RunStore
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))
    data = "builtin:tiles?n=4&size=8&seed=1"
    assert main(["search", data, "--out", str(tmp_path / "run"), "--budget-epochs", "3",
                 "--workers", "0", "--max-candidates", "3"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("space: none given, so the general space for 8x8 colour images, "
                          "8 classes")
    with RunStore(tmp_path / "run") as store:
        config = store.config()
    assert config["space_source"] == "builtin:general"
    assert "general space for 8x8 colour images" in config["space"]
