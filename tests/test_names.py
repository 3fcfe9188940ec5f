"""Words the project keeps out appear nowhere: not in the package, the README, the
generated C, the command help, nor the files a search and an export write.

The words are stored here reversed, so that this file does not spell them either
(the project's naming check reads every tracked file).
"""

import re
import subprocess
from pathlib import Path

import pytest

from helpers import TINY_DATA, TINY_SPACE
from tinyconv.cli import main

ROOT = Path(__file__).resolve().parents[1]
#: the old names, reversed: the activation buffer's, the gradient command's, the
#: held-out accuracy key and the epoch option pair
REVERSED = ("anera", "sdarg-kcehc", "sdarg_kcehc", "cca_lav", "shcope_xam", "shcope_nim",
            "shcope-xam", "shcope-nim")
WORDS = tuple(w[::-1] for w in REVERSED)
PATTERN = re.compile("|".join(re.escape(w) for w in WORDS), re.IGNORECASE)


def _hits(text: str) -> list[str]:
    return sorted(set(m.group(0) for m in PATTERN.finditer(text)))


def test_no_tracked_file_holds_an_old_name():
    """Every tracked text file of the repository (code, tests, docs, spaces)."""
    files = subprocess.run(["git", "ls-files"], cwd=ROOT, capture_output=True, text=True,
                           check=True).stdout.split()
    found = {}
    for name in files:
        path = ROOT / name
        if path.suffix in (".png", ".npz", ".npy") or not path.is_file():
            continue
        hits = _hits(path.read_text(errors="replace"))
        if hits:
            found[name] = hits
    assert not found


def test_generated_c_and_help_hold_no_old_name(capsys):
    """The C source and header, and every command's --help."""
    from tinyconv.device.measure import random_network
    from tinyconv.export.c_writer import generate_c

    qnet, _ = random_network("12x12rgb/c4k3-p2-dw3-c8k1-gap", 3, seed=0)
    for style in ("fast", "plain"):
        code = generate_c(qnet, "tc", style=style)
        assert not _hits(code.source + code.header)
    from tinyconv.cli import COMMANDS
    for name in COMMANDS:
        assert main([name, "--help"]) == 0
        shown = capsys.readouterr().out
        assert "usage: tinyconv" in shown and not _hits(shown), name


@pytest.mark.slow  # a tiny search, its report and an export: ~5-10 s
def test_a_run_folder_holds_no_old_name(tmp_path, capsys):
    """What a search and an export write: tables, report, summary, C files."""
    space = tmp_path / "space.toml"
    space.write_text(TINY_SPACE)
    out = tmp_path / "run"
    assert main(["search", TINY_DATA, "--space", str(space), "--out", str(out),
                 "--top-epochs", "3", "--workers", "0", "--batch-size", "16"]) == 0
    assert main(["export", str(out), "--calib", "16"]) == 0
    printed = capsys.readouterr()
    assert not _hits(printed.out + printed.err)
    for path in out.rglob("*"):
        if path.suffix in (".csv", ".html", ".json", ".c", ".h"):
            assert not _hits(path.read_text(errors="replace")), path.name
    # the store's columns too (sqlite_master holds the schema as text)
    import sqlite3
    con = sqlite3.connect(f"file:{out / 'run.sqlite'}?mode=ro", uri=True)
    schema = " ".join(r[0] or "" for r in con.execute("SELECT sql FROM sqlite_master"))
    con.close()
    assert not _hits(schema)
