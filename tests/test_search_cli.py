"""Tests of the ``tinyconv search`` command line: output, exit codes, refusals."""

from __future__ import annotations

import pandas as pd
import pytest

from helpers import TINY_DATA, TINY_SPACE
from tinyconv.cli import main

DATA, SPACE = TINY_DATA, TINY_SPACE


def _args(space, out, *extra):
    return ["search", DATA, "--space", str(space), "--out", str(out), "--top-epochs", "3",
            "--workers", "0", "--batch-size", "16", "--lr", "0.01", *extra]


@pytest.fixture()
def space(tmp_path):
    path = tmp_path / "space.toml"
    path.write_text(SPACE)
    return path


def test_search_prints_summary_and_pick(space, tmp_path, capsys, monkeypatch):
    """A search prints the candidates, the ranking, the pick and where the files are."""
    import tinyconv.commands.search as cmd
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))
    out = tmp_path / "run"
    assert main(_args(space, out, "--rank-by", "accuracy")) == 0
    text = capsys.readouterr().out
    assert "candidates: 6 in the space, 6 within budget, 6 searched" in text
    assert "end: the whole plan ran" in text
    table = pd.read_csv(out / "ranking.csv")
    pick = table[table["pick"]].iloc[0]
    assert f"pick: {pick.candidate}" in text
    assert "recipe of every candidate: aug=none copies=1 lr=0.01 wd=0 sched=constant" in text
    assert "the pick first (the fewest parameters within one standard error" in " ".join(
        text.split())
    # Row 1 of ranking.csv is the pick; then the groups in order, each by the asked order.
    assert table["pick"].iloc[0] and table["group"].iloc[0] == "pick"
    order = ["pick", "within_one_se", "outside_one_se", "stopped_early"]
    assert list(table["group"].map(order.index)) == sorted(table["group"].map(order.index))
    for _, rows in table.groupby("group"):
        assert list(rows["rank_accuracy"]) == sorted(rows["rank_accuracy"])
    # The terminal table has the same rows in the same order, the pick starred first.
    names = set(table["candidate"])
    shown = [word for line in text.splitlines() if line.startswith("  ")
             for word in line.split()[:2] if word in names]
    assert shown == list(table["candidate"])
    assert text.count("\u2605") == 1 and f"\u2605 {pick.candidate}" in text
    assert "pp acc" not in text and "pk KB" not in text and "fl KB" not in text
    assert f"ranking: {out / 'ranking.csv'}" in text


def test_other_settings_exit_2(space, tmp_path, capsys, monkeypatch):
    """The same folder with other folds exits 2 with the difference and the fix."""
    import tinyconv.commands.search as cmd
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))
    out = tmp_path / "run"
    assert main(_args(space, out, "--budget-epochs", "3")) == 0
    capsys.readouterr()
    assert main(_args(space, out, "--folds", "2")) == 2
    err = capsys.readouterr().err
    assert "folds: 3 in the run folder, 2 now" in err and "another --out folder" in err


@pytest.mark.parametrize("extra,message", [
    (["--budget-cpu", "ten minutes"], "CPU budget 'ten minutes' is not a duration"),
    (["--folds", "1"], "folds must be an integer >= 2, got 1; set --folds"),
    (["--max-params", "3"], "budget"),
    (["--eta", "1"], "eta must be an integer >= 2"),
    (["--base-epochs", "5"], "base epochs 5 is more than top epochs 3"),
])
def test_bad_options_exit_2(space, tmp_path, capsys, extra, message):
    """Unusable options exit 2 with a message naming the value and the rule."""
    assert main(_args(space, tmp_path / "run", *extra)) == 2
    assert message in capsys.readouterr().err


def test_missing_space_file_exit_2(tmp_path, capsys, monkeypatch):
    """A space file that does not exist exits 2 naming the path, before any image is read."""
    import tinyconv.data.load as load

    def no_reading(*args, **kwargs):
        raise AssertionError("the data were read before the space file was checked")

    monkeypatch.setattr(load, "survey", no_reading)
    assert main(_args(tmp_path / "nope.toml", tmp_path / "run")) == 2
    assert "nope.toml" in capsys.readouterr().err


def test_a_damaged_store_is_found_before_any_image_is_read(space, tmp_path, capsys,
                                                           monkeypatch):
    """A run folder whose store is damaged exits 2 without reading the data first."""
    import tinyconv.data.load as load

    run = tmp_path / "run"
    run.mkdir()
    (run / "run.sqlite").write_bytes(b"not a database, " * 512)
    monkeypatch.setattr(load, "survey", lambda *a, **k: pytest.fail("the data were read"))
    assert main(_args(space, run)) == 2
    assert "run.sqlite" in capsys.readouterr().err


def test_unreadable_images_stop_the_search_unless_skipped(tmp_path, capsys, monkeypatch):
    """A folder with a corrupt image exits 2 naming it; --skip-bad searches without it."""
    import json

    from PIL import Image

    import tinyconv.commands.search as cmd
    from search.store import RunStore
    from tinyconv.data import load_data
    monkeypatch.setattr(cmd, "write_report_if_available", lambda d: ("missing", "skipped"))
    tiles = load_data(DATA)
    folder = tmp_path / "photos"
    for i, (image, label) in enumerate(zip(tiles.images, tiles.labels)):
        (folder / tiles.classes[label]).mkdir(parents=True, exist_ok=True)
        Image.fromarray(image).save(folder / tiles.classes[label] / f"{i}.png")
    broken = folder / tiles.classes[0] / "broken.jpg"
    broken.write_bytes(b"\xff\xd8\xff\xe0 not a picture")
    space = tmp_path / "space.toml"
    space.write_text('[input]\nspecs = ["8x8rgb"]\n')
    args = ["search", str(folder), "--space", str(space), "--top-epochs", "1",
            "--workers", "0", "--batch-size", "16"]
    monkeypatch.chdir(tmp_path)
    assert main(args + ["--out", "first"]) == 2
    err = capsys.readouterr().err
    assert "1 unreadable image file" in err and str(broken) in err and "--skip-bad" in err
    assert main(args + ["--out", "second", "--skip-bad"]) == 0
    # the data warning reaches the user as the tool's own line (no Python warning text)
    assert "\nwarning: skipped 1 unreadable image file: " in "\n" + capsys.readouterr().err
    with RunStore(tmp_path / "second") as store:
        config = store.config()
    assert config["skip_bad"] is True and config["n_images"] == tiles.labels.size
    # Stored absolute, so the report and the export can read it from anywhere.
    assert config["data"] == str(folder.resolve()), json.dumps(config["data"])


def test_a_narrow_terminal_drops_columns_and_says_so():
    """At 80 columns the table keeps accuracy, parameters, epochs and p, and names the rest."""
    from tinyconv.workflows.summary import ranking_table
    rows = [{"candidate": f"16x16gray/c{8 * i}k3-p2", "group": g, "pick": g == "pick",
             "acc_mean": 0.8 - i / 10, "acc_se": 0.01, "train_acc_mean": 0.9,
             "acc_per_kparam": 0.1, "params": 1000 * i, "macs": 10_000 * i, "peak_kb": 1.0,
             "flash_kb": 2.0, "ms": float("nan"), "int8_acc_mean": float("nan"),
             "epochs": 9, "p_vs_best": 0.5} for i, g in
            ((1, "pick"), (2, "within_one_se"), (3, "outside_one_se"))]
    table = pd.DataFrame(rows)
    wide, narrow = ranking_table(table), ranking_table(table, width=80)
    assert "MACs" in wide[0] and max(map(len, wide)) > 80
    assert max(map(len, narrow)) <= 80 and "MACs" not in narrow[0]
    assert "accuracy" in narrow[1] and "parameters" in narrow[1] and "epochs" in narrow[1]
    assert narrow[-2].startswith("(left out to fit the terminal: MACs per image, training")
    assert narrow[-1].endswith("ranking.csv has every column)")


def test_report_later_writes_no_report(space, tmp_path, capsys, monkeypatch):
    """--report-later ends the search without drawing the report and says how to write it."""
    import tinyconv.commands.search as cmd

    def refuse(run_dir):
        raise AssertionError("the report was drawn despite --report-later")

    monkeypatch.setattr(cmd, "write_report_if_available", refuse)
    out = tmp_path / "run"
    assert main(_args(space, out, "--report-later")) == 0
    text = capsys.readouterr().out
    assert f"report: not written (--report-later); 'tinyconv report {out}' writes it" in text
    assert (out / "ranking.csv").exists() and not (out / "report.html").exists()
