"""The export command: a run folder's pick, retrained, quantised and written as C."""

import contextlib
import io
import json
import re

import numpy as np
import pandas as pd
import pytest

from search.config import SearchSettings
from search.rank import rank_run
from search.store import RunStore
from search.unit import UnitResult, UnitTask
from tinyconv.cli import main
from tinyconv.workflows.export_pick import export_run
from tinyconv.cost import cost_of
from tinyconv.data import fingerprint, load_data
from tinyconv.errors import RunError
from tinyconv.export.summary import ExportSummary
from tinyconv.network import Network

DATA = "builtin:tiles?n=6&size=8&seed=1"
# candidate -> per-fold held-out accuracies written into the store by hand
SCORES = {"8x8rgb/c4k3-p2-gap": (0.50, 0.55), "8x8rgb/c6k3-bn-p2-d8": (0.60, 0.58),
          "8x8rgb/d6": (0.40, 0.42)}
TRAINING = {"batch_size": 16, "lr": 0.01}


def make_run(run_dir, fp: str | None = None):
    """A two-fold run with one rung whose units were scored by hand (no training)."""
    data = load_data(DATA)
    k = len(data.classes)
    settings = SearchSettings(data=DATA, fingerprint=fp or fingerprint(data),
                              classes=tuple(data.classes), n_images=len(data.labels),
                              space="\n".join(SCORES), folds=2, seed=4, top_epochs=2,
                              training=dict(TRAINING))
    rows = []
    for cand in SCORES:
        c = cost_of(cand, k)
        rows.append({"candidate": cand, "params": c.params, "macs": c.macs,
                     "peak_int8_bytes": c.peak_int8_bytes, "flash_bytes": c.flash_bytes,
                     "within_budget": True})
    store = RunStore.start(run_dir, settings.as_dict(), pd.DataFrame(rows))
    with store:
        for cand, accs in SCORES.items():
            for fold, acc in enumerate(accs):
                task = UnitTask(cand, fold, 0, 2, 1, k, tuple(sorted(TRAINING.items())))
                idx = np.arange(fold, len(data.labels), 2)
                probs = np.full((len(idx), k), 1.0 / k, np.float32)
                store.record(UnitResult(task, "done", "", 0.9, 0.3, acc, 1.0, 0.1, 0.1, {},
                                        idx, data.labels[idx], np.zeros(len(idx), np.int64),
                                        probs))
    return run_dir


def cli(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(argv))
    return code, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    return make_run(tmp_path_factory.mktemp("export_run") / "run")


def test_cli_exports_the_best_candidate(run_dir, tmp_path):
    """`tinyconv export --pick best` writes weights, C, header and summary with true sizes."""
    out = tmp_path / "out"
    code, stdout, stderr = cli("export", str(run_dir), "--pick", "best", "--out", str(out),
                               "--epochs", "2", "--calib", "20", "--prefix", "marks")
    assert code == 0, stderr
    best = "8x8rgb/c6k3-bn-p2-d8"  # highest mean of the hand-made scores
    summary = ExportSummary.from_json((out / "summary.json").read_text())
    assert summary.arch == best and summary.n_calib == 20 and summary.prefix == "marks"
    cost = cost_of(best, 8)
    assert (summary.activation_bytes, summary.flash_bytes) == (cost.peak_int8_bytes, cost.flash_bytes)
    assert f"#define MARKS_ACTIVATION_BYTES {cost.peak_int8_bytes}" in (out / "marks.h").read_text()
    assert "marks_classify" in (out / "marks.c").read_text()
    assert summary.n_eval == 48 and 0.0 <= summary.agreement <= 1.0
    assert summary.cv_accuracy == pytest.approx(0.59)
    assert f"flash         {cost.flash_bytes:,} bytes" in stdout
    assert "top-1 agreement on 48 training (all) images" in stdout
    assert "2 of 2 epochs: training loss" in stderr
    saved = Network.load(out / "network.npz")
    assert str(saved.network.arch) == best and saved.meta["epochs"] == 2
    assert saved.arrays["norm_mean"].shape == (3,)
    assert json.loads((out / "summary.json").read_text())["classes"][0] == "ring"


def test_retraining_is_told_in_a_few_lines(run_dir, tmp_path):
    """27 epochs of retraining print 4 lines on stderr (each quarter and the last), all
    of them with --each-epoch; none of them on stdout, which keeps the summary."""
    for extra, expect in (((), [7, 14, 21, 27]), (("--each-epoch",), list(range(1, 28)))):
        code, stdout, stderr = cli("export", str(run_dir), "--out", str(tmp_path / "x"),
                                   "--epochs", "27", "--calib", "8", *extra)
        assert code == 0, stderr
        shown = [int(m) for m in re.findall(r"^  (\d+) of 27 epochs: training loss", stderr,
                                            re.M)]
        assert shown == expect
        assert "epochs: training loss" not in stdout and stdout.startswith("architecture")


def test_one_se_pick_and_default_epochs(run_dir, tmp_path):
    """The default pick is the ranking's one-SE pick, trained for its rung's epochs."""
    with RunStore(run_dir) as store:
        table = rank_run(store)
    want = table.loc[table["pick"], "candidate"].iloc[0]
    summary = export_run(run_dir, out_dir=tmp_path / "e", calib=8, prefix="tc")
    assert summary.arch == want
    assert Network.load(tmp_path / "e" / "network.npz").meta["epochs"] == 2


@pytest.mark.parametrize("argv, message", [
    (["--pick", "8x8rgb/c9k3"], r"--pick '8x8rgb/c9k3' is not a ranked candidate"),
    (["--prefix", "9lives"], r"prefix '9lives' is not a usable C identifier"),
    (["--calib", "0"], r"argument --calib: 0 must be at least 1"),
])
def test_bad_options_exit_2(run_dir, tmp_path, argv, message):
    """Unknown picks, bad prefixes and bad counts exit with code 2 and say why."""
    code, _, stderr = cli("export", str(run_dir), "--out", str(tmp_path / "x"), *argv)
    assert code == 2
    assert re.search(message, stderr)
    assert not (tmp_path / "x" / "summary.json").exists()


def test_changed_data_is_refused(tmp_path):
    """A run whose data fingerprint no longer matches is refused before training."""
    run = make_run(tmp_path / "run", fp="0" * 16)
    with pytest.raises(RunError, match="changed since the search"):
        export_run(run, out_dir=tmp_path / "e")


def test_not_a_run_folder(tmp_path):
    """A folder without a store is refused with exit code 2."""
    code, _, stderr = cli("export", str(tmp_path))
    assert code == 2 and "no run here" in stderr


@pytest.mark.slow
def test_export_into_the_run_folder_refreshes_the_report(tmp_path):
    """After `tinyconv export DIR` the report shows the int8 agreement and the per-layer costs."""
    run = make_run(tmp_path / "run")
    code, stdout, stderr = cli("export", str(run), "--calib", "8")
    assert code == 0, stderr
    assert stdout.rstrip().endswith(f"report: {run / 'report.html'}")
    page = (run / "report.html").read_text(encoding="utf-8")
    summary = json.loads((run / "export" / "summary.json").read_text())
    assert "int8 agreement with the float network" in page
    assert f"{100 * summary['agreement']:.1f}% of 48 images (the same class chosen)" in page
    assert '<section id="cost">' in page
    costs = pd.read_csv(run / "pick_cost.csv")
    assert list(costs["step"]) == [r.name for r in cost_of(summary["arch"], 8).rows]
    for step in costs["step"]:
        assert f"<code>{step}</code>" in page
