"""A search whose output is piped, as in a log file or CI: progress lines, no raw warnings."""

from __future__ import annotations

import os
import re
import subprocess
import sys

import pandas as pd
import pytest
from PIL import Image

from helpers import TINY_DATA
from search.runner import plan_brackets
from tinyconv.data import load_data

# Two candidates at the default schedule (9 epochs at most, eta 3): three rungs in the
# first bracket, so every kind of rung line shows, in a few seconds.
SPACE = """
[input]
sizes = [8]
modes = ["gray"]
[stages]
count = [0, 1]
filters = [2]
"""


def _folder(root):
    """The tiny tile set as PNG files, plus a stray text file (a data note)."""
    tiles = load_data(TINY_DATA)
    for i, (image, label) in enumerate(zip(tiles.images, tiles.labels)):
        (root / tiles.classes[label]).mkdir(parents=True, exist_ok=True)
        Image.fromarray(image).save(root / tiles.classes[label] / f"{i}.png")
    (root / tiles.classes[0] / "notes.txt").write_text("taken on bench 2")
    return root


@pytest.mark.slow
def test_piped_search_shows_every_rung_and_no_python_warning_text(tmp_path):
    """Piped, a search prints a line per rung and a status line; data notes are our own."""
    folder = _folder(tmp_path / "photos")
    space = tmp_path / "space.toml"
    space.write_text(SPACE)
    done = subprocess.run(
        [sys.executable, "-m", "tinyconv", "search", str(folder), "--space", str(space),
         "--out", str(tmp_path / "run"), "--workers", "0", "--batch-size", "16"],
        capture_output=True, text=True, cwd=os.getcwd(), timeout=600,
        env={**os.environ, "COLUMNS": "120"})
    assert done.returncode == 0, done.stderr
    err = done.stderr
    ranked = pd.read_csv(tmp_path / "run" / "ranking.csv")
    assert len(ranked) == 2
    rungs = re.findall(r"^rung (\d) of (\d) \((\d) epochs?\)", err, re.M)
    plan = plan_brackets(["8x8gray", "8x8gray/c2k3-p2"], 9, 3, False, 0)
    expect = [(str(r.level + 1), "3", str(r.epochs)) for b, _ in plan for r in b.rungs]
    assert rungs == expect and len(expect) == 6    # brackets of 3, 2 and 1 rungs
    assert re.search(r"^progress: \d+ units stored, training CPU .*epochs trained in all",
                     err, re.M)
    assert "note: ignored 1 non-image file" in err
    for raw in ("Warning", "warnings.warn", "site-packages", "Traceback", ".py:"):
        assert raw not in err and raw not in done.stdout, raw
