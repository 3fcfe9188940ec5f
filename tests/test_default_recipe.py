"""The search's default recipe, measured: the demo's pick on the demo's tiles."""

from __future__ import annotations

import pytest

from search.session import DEFAULT_TRAINING, SearchRequest, run_search

PICK_SPACE = """
[input]
specs = ["16x16gray"]
[stages]
count = [3]
widths = [[32, 32, 32]]
[head]
kind = ["gap"]
"""


@pytest.mark.slow  # 3 folds x 27 epochs of a 19,080-parameter network: 3 s idle, 16 s loaded
def test_default_recipe_reaches_three_quarters_on_the_tiles(tmp_path):
    """search --full with the default recipe (no augmentation), 3 folds and 27 epochs,
    gives 16x16gray/c32k3-p2-c32k3-p2-c32k3-p2-gap at least 75% held-out on the tiles
    (the floor the README's measurement of the default recipe clears: 83.1%)."""
    assert DEFAULT_TRAINING["augment"] == "none" and DEFAULT_TRAINING["copies"] == 1
    summary = run_search(SearchRequest(
        data="builtin:tiles?n=80&size=32&seed=0", space=PICK_SPACE, out=tmp_path / "run",
        folds=3, seed=0, top_epochs=27, full=True, workers=0))
    row = summary.table.iloc[0]
    assert row["candidate"] == "16x16gray/c32k3-p2-c32k3-p2-c32k3-p2-gap"
    assert row["recipe"] == "aug=none copies=1 lr=0.005 wd=0 sched=constant"
    assert row["acc_mean"] >= 0.75
