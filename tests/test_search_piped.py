"""A search whose output is piped, as in a log file or CI: progress lines, no raw warnings."""

from __future__ import annotations

import os
import re
import subprocess
import sys

import pandas as pd
import pytest
from PIL import Image

from helpers import TINY_DATA, TINY_SPACE
from tinyconv.data import load_data


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
    space.write_text(TINY_SPACE)
    done = subprocess.run(
        [sys.executable, "-m", "tinyconv", "search", str(folder), "--space", str(space),
         "--out", str(tmp_path / "run"), "--max-epochs", "3", "--workers", "0",
         "--batch-size", "16"],
        capture_output=True, text=True, cwd=os.getcwd(), timeout=600,
        env={**os.environ, "COLUMNS": "120"})
    assert done.returncode == 0, done.stderr
    err = done.stderr
    units = pd.read_csv(tmp_path / "run" / "ranking.csv")
    assert len(units)
    rungs = re.findall(r"^rung (\d) of (\d) \((\d) epochs?\)", err, re.M)
    # max 3 epochs, eta 3: two brackets, the first with rungs of 1 and 3 epochs, the second
    # with one rung of 3 (Hyperband, Li et al. 2018): three rung lines.
    assert rungs == [("1", "2", "1"), ("2", "2", "3"), ("2", "2", "3")]
    assert re.search(r"^progress: \d+ units stored, training CPU .*epochs of the plan left",
                     err, re.M)
    assert "note: ignored 1 non-image file" in err
    for raw in ("Warning", "warnings.warn", "site-packages", "Traceback", ".py:"):
        assert raw not in err and raw not in done.stdout, raw
