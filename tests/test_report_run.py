"""Tests of the report written from a real (tiny) run store."""

from __future__ import annotations

import base64
import io
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image

from report_fixture import CANDIDATES, shared_report
from search.rank import rank_run
from search.store import RunStore
from tinyconv.report.collect import collect

# Every test here reads the shared real run (about 10-20 s to build and report once).
pytestmark = pytest.mark.slow

FIGURES = ("folds.png", "pareto_params.png", "pareto_macs.png", "curves.png", "confusion.png",
           "confusions_gallery.png", "mistakes.png")
TABLES = ("ranking.csv", "folds.csv", "per_class.csv", "confusion_counts.csv", "confusions.csv",
          "mistakes.csv", "budgets.csv")


@pytest.fixture(scope="session")
def written(tmp_path_factory) -> tuple[Path, int, str]:
    return shared_report(tmp_path_factory)


@pytest.fixture(scope="session")
def run_dir(written) -> Path:
    return written[0]


class _Refs(HTMLParser):
    """Every tag, and every attribute that can point at another resource."""

    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.refs: list[tuple[str, str, str]] = []
        self.ids: set[str] = set()
        self.rows: list[tuple[str, list[str]]] = []   # (class, cell texts) of table rows
        self._row: list[str] | None = None
        self._row_class = ""
        self._cell: list[str] | None = None
        self.style = ""
        self._in_style = False

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        for key in ("src", "href", "srcset", "data", "poster", "action", "background"):
            if key in a:
                self.refs.append((tag, key, a[key]))
        if tag == "tr":
            self._row, self._row_class = [], a.get("class", "")
        if tag in ("td", "th"):
            self._cell = []
        self._in_style = tag == "style"

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._row is not None and self._cell is not None:
            self._row.append("".join(self._cell).strip())
            self._cell = None
        if tag == "tr" and self._row is not None:
            self.rows.append((self._row_class, self._row))
            self._row = None
        if tag == "style":
            self._in_style = False

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._in_style:
            self.style += data


def _parse(run_dir: Path) -> tuple[str, _Refs]:
    text = (run_dir / "report.html").read_text(encoding="utf-8")
    p = _Refs()
    p.feed(text)
    return text, p


def test_report_writes_every_figure_as_a_valid_png(run_dir):
    """Each figure file exists and decodes as a PNG of a sensible size (Pillow)."""
    for name in FIGURES:
        path = run_dir / name
        assert path.is_file(), name
        with Image.open(path) as im:
            im.verify()
        with Image.open(path) as im:
            assert im.format == "PNG" and im.size[0] >= 400 and im.size[1] >= 250, name
    for name in TABLES:
        assert (run_dir / name).is_file(), name


def test_ranking_csv_equals_the_ranking(run_dir):
    """ranking.csv holds exactly what rank_run computes from the store."""
    with RunStore(run_dir) as store:
        expect = rank_run(store)
    got = pd.read_csv(run_dir / "ranking.csv")
    assert list(got.columns) == list(expect.columns)
    pd.testing.assert_frame_equal(got, expect, check_dtype=False, rtol=0, atol=1e-15)
    # the over-budget candidate is costed but never trained, so never ranked
    assert CANDIDATES[-1] not in set(got["candidate"])


def test_page_ranking_table_shows_the_ranking_values(run_dir):
    """The page's ranking rows follow the ranking: the pick first, groups, counts, accuracy."""
    with RunStore(run_dir) as store:
        ranking = rank_run(store)
    _, p = _parse(run_dir)
    rows = [(cls, cells) for cls, cells in p.rows if len(cells) == 13 and cells[0].isdigit()]
    assert len(rows) == len(ranking)
    assert rows[0][0] == "pick" and rows[0][1][1] == "the pick"
    for (cls, cells), (_, r) in zip(rows, ranking.iterrows()):
        assert cells[2] == r["candidate"]
        assert cells[3] == f"{100 * r['acc_mean']:.1f}% \u00b1 {100 * r['acc_se']:.1f}%"
        assert cells[4] == f"{100 * r['train_acc_mean']:.1f}%"
        assert cells[7] == f"{int(r['params']):,}"
        assert cells[8] == f"{int(r['macs']):,}"
        assert (cls == "pick") == bool(r["pick"])
        if not r["finalist"]:   # a lower rung is explained where it is listed
            assert cells[1] == f"stopped at rung {int(r['rung']) + 1} ({int(r['epochs'])} epochs)"
    headers = next(cells for _, cells in p.rows if "candidate" in cells)
    assert not {"pp acc", "pk KB", "fl KB", "params"} & set(headers)


def test_report_follows_the_ranking_order_the_search_stored(run_dir, tmp_path):
    """A run ranked by accuracy (the stored --rank-by) is reported in that order."""
    import shutil

    from search.store_writer import RunWriter

    shutil.copy(run_dir / "run.sqlite", tmp_path / "run.sqlite")
    with RunWriter(tmp_path) as store:
        by_acc, by_param = rank_run(store, by="accuracy"), rank_run(store, by="per_param")
        assert list(by_acc["candidate"]) != list(by_param["candidate"])   # they differ here
        store.set_rank_order("accuracy")
    assert list(collect(tmp_path).ranking["candidate"]) == list(by_acc["candidate"])
    with RunWriter(tmp_path) as store:
        store.set_rank_order("per_param")
    assert list(collect(tmp_path).ranking["candidate"]) == list(by_param["candidate"])


def test_folds_csv_are_the_stored_unit_accuracies(run_dir):
    """folds.csv lists each ranked candidate's stored per-fold accuracies at its ranked rung."""
    folds = pd.read_csv(run_dir / "folds.csv")
    with RunStore(run_dir) as store:
        units, ranking = store.units("done"), rank_run(store)
    for _, r in ranking.iterrows():
        mine = folds[folds["candidate"] == r["candidate"]].sort_values("fold")
        theirs = units[(units["candidate"] == r["candidate"]) & (units["rung"] == r["rung"])]
        np.testing.assert_array_equal(mine["held_acc"], theirs.sort_values("fold")["held_acc"])
        assert mine["held_acc"].mean() == pytest.approx(r["acc_mean"], abs=1e-12)


def test_confusion_tables_match_the_stored_predictions(run_dir):
    """The pick's confusion matrix and per-class scores equal scikit-learn's on its predictions."""
    from sklearn.metrics import confusion_matrix, precision_score, recall_score

    with RunStore(run_dir) as store:
        pick = rank_run(store).query("pick").iloc[0]
        pred = store.predictions(pick["candidate"], int(pick["rung"]))
        n_images, k = store.config()["n_images"], len(store.config()["classes"])
    counts = pd.read_csv(run_dir / "confusion_counts.csv", index_col=0).to_numpy()
    # every image is held out exactly once over the folds
    assert counts.sum() == n_images == len(pred)
    np.testing.assert_array_equal(counts, confusion_matrix(pred["label"], pred["pred"],
                                                           labels=range(k)))
    per = pd.read_csv(run_dir / "per_class.csv")
    np.testing.assert_allclose(per["recall"], recall_score(pred["label"], pred["pred"],
                                                           labels=range(k), average=None))
    ok = per["predicted"] > 0
    np.testing.assert_allclose(per["precision"][ok], precision_score(
        pred["label"], pred["pred"], labels=range(k), average=None, zero_division=0)[ok])


def test_page_embeds_every_image_and_references_nothing_outside(run_dir):
    """Images are PNG data URIs equal to the figure files; links only point inside the page."""
    text, p = _parse(run_dir)
    assert "script" not in p.tags and "link" not in p.tags and "iframe" not in p.tags
    assert "<script" not in text.lower()
    assert not re.search(r"url\s*\(", p.style) and "@import" not in p.style
    srcs = [v for tag, key, v in p.refs if tag == "img" and key == "src"]
    assert len(srcs) == len(FIGURES)
    files = {(run_dir / n).read_bytes() for n in FIGURES}
    for src in srcs:
        assert src.startswith("data:image/png;base64,")
        data = base64.b64decode(src.split(",", 1)[1], validate=True)
        assert data in files
        with Image.open(io.BytesIO(data)) as im:
            im.verify()
    for tag, key, v in p.refs:
        if key == "src":
            continue
        assert key == "href" and v.startswith("#") and v[1:] in p.ids, (tag, key, v)


def test_page_explains_the_pick_and_cautions(run_dir):
    """The page names the pick with its one-SE reason, chance accuracy, and the cautions."""
    text = (run_dir / "report.html").read_text(encoding="utf-8")
    with RunStore(run_dir) as store:
        pick = rank_run(store).query("pick").iloc[0]
    assert "one-standard-error rule" in text and str(pick["candidate"]) in text
    assert "12.5%" in text   # chance 1/K with the 8 tile classes
    for phrase in ("not a promise about the images", "backgrounds", "duplicates",
                   "not for decisions about people"):
        assert phrase in text


def test_report_command_prints_the_path(written):
    """``tinyconv report DIR`` (which wrote the shared report) exited 0 and printed the path."""
    run_dir, code, printed = written
    assert code == 0
    assert printed.strip() == str(run_dir / "report.html")


def test_changed_data_leaves_out_the_galleries_with_a_notice(run_dir, monkeypatch):
    """When the data's fingerprint differs from the run's, galleries are left out, saying why."""
    import tinyconv.data
    from tinyconv.report.assemble import Assembled
    from tinyconv.report.sections import pick_section

    monkeypatch.setattr(tinyconv.data, "fingerprint", lambda ds: "f" * 64)
    data = collect(run_dir)
    assert data.images is None and data.predictions is not None
    assert "has changed since the run" in data.notices[0]
    section = pick_section(data, Assembled(notices=list(data.notices)))
    assert "has changed since the run" in section.body and "<img" not in section.body


def test_box_plot_keeps_the_pick_when_candidates_are_many(run_dir, monkeypatch):
    """With more candidates than fit one axis, the box plot keeps finalists first and the pick."""
    import tinyconv.report.assemble as assemble

    data = collect(run_dir)
    assert assemble.box_candidates(data) == list(
        data.ranking.sort_values(["finalist", "rank_per_param"], ascending=[False, True])
        ["candidate"])
    monkeypatch.setattr(assemble, "MAX_BOXES", 1)
    assert assemble.box_candidates(data) == [data.pick["candidate"]]


def test_moved_data_falls_back_to_the_run_folders_copy(run_dir, monkeypatch):
    """When the data set cannot be reloaded, the galleries use the run folder's checked copy."""
    import tinyconv.data
    from tinyconv.errors import DataError

    def gone(spec, **kw):
        raise DataError(f"{spec}: no such file or folder")
    monkeypatch.setattr(tinyconv.data, "load_data", gone)
    data = collect(run_dir)
    assert data.images is not None and data.paths is None
    assert "could not be reloaded" in data.notices[0]
    assert "copy of the images kept in the run folder" in data.notices[0]
    with RunStore(run_dir) as store:
        n = store.config()["n_images"]
    assert data.images.shape[0] == n
