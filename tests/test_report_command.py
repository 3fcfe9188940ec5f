"""Tests of ``tinyconv report`` on folders that hold no usable run."""

from __future__ import annotations

import pytest

from report_fixture import CANDIDATES
from search.store import RunStore
from tinyconv.cli import main
from tinyconv.errors import RunError
from tinyconv.report import write_report


def test_missing_and_empty_run_folders_are_clear_errors(tmp_path, capsys):
    """A missing folder, a folder without a store and a store without results exit 2."""
    with pytest.raises(RunError, match="no such run folder"):
        write_report(tmp_path / "nowhere")
    with pytest.raises(RunError, match=r"no run here \(no run.sqlite\)"):
        write_report(tmp_path)
    assert main(["report", str(tmp_path / "nowhere")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "no such run folder" in err
    assert main(["report", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "no run here" in err


def test_store_without_finished_rung_is_a_clear_error(tmp_path):
    """A run whose units have not finished all folds of any rung cannot be reported yet."""
    from report_fixture import BUDGET, DATA_SPEC
    from search.config import SearchSettings
    from search.space import filter_budget
    from tinyconv.arch import parse

    filtered = filter_budget([parse(CANDIDATES[0])], BUDGET, 8)
    settings = SearchSettings(data=DATA_SPEC, fingerprint="0" * 64, classes=tuple("abcdefgh"),
                              n_images=96, space=CANDIDATES[0], folds=3)
    RunStore.start(tmp_path, settings.as_dict(), filtered.table()).close()
    with pytest.raises(RunError, match="nothing to report yet"):
        write_report(tmp_path)
