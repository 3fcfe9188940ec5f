"""``tinyconv inspect``: what it prints for good and bad data, and its exit codes."""

from __future__ import annotations

import re

import numpy as np
from PIL import Image

from tinyconv.cli import main


def _folder(root, counts, size=(10, 10), seed=0):
    rng = np.random.default_rng(seed)
    for name, n in counts.items():
        (root / name).mkdir(parents=True)
        for i in range(n):
            Image.fromarray(rng.integers(0, 256, (*size, 3), dtype=np.uint8)).save(
                root / name / f"{i}.png")
    return root


def test_inspect_folder_summary(tmp_path, capsys):
    """Classes with counts, sizes, kinds, duplicates, problems and most folds are printed."""
    root = _folder(tmp_path / "d", {"bowl": 5, "cup": 3})
    (root / "cup" / "readme.txt").write_text("x")
    assert main(["inspect", str(root)]) == 0
    out = capsys.readouterr().out
    assert "images: 8 usable in 2 classes, stored as 10x10 RGB (uint8)" in out
    assert re.search(r"^bowl +5$", out, re.M) and re.search(r"^cup +3$", out, re.M)
    assert "sizes seen: 10x10 (8)" in out
    assert "colour kinds: RGB (8)" in out
    assert "duplicates: none" in out
    assert "notes: 1\n  - note: ignored 1 non-image file" in out
    assert "problems that stop a search: none" in out
    assert "most folds: 3 (the smallest class, 'cup', has 3 images)" in out
    assert "fingerprint: " in out


def test_inspect_folds_check(tmp_path, capsys):
    """--folds within the limit passes; beyond it exits 2 naming the class and the largest k."""
    root = _folder(tmp_path / "d", {"bowl": 5, "cup": 2})
    assert main(["inspect", str(root), "--folds", "2"]) == 0
    assert "2 folds: possible" in capsys.readouterr().out
    assert main(["inspect", str(root), "--folds", "3"]) == 2
    captured = capsys.readouterr()
    assert re.search(r"^cup +2$", captured.out, re.M)          # the inventory still shows
    assert ("problems that stop a search: 1\n  - class 'cup' has 2 images, fewer than the 3 "
            "folds asked for") in captured.out
    assert "the largest number of folds that works is 2" in captured.out
    assert captured.err.startswith(f"error: {root}: 1 problem listed above")


def test_inspect_lists_every_class_and_every_bad_file_in_one_run(tmp_path, capsys):
    """With bad files, an empty class and a one-image class: inventory, then all problems."""
    root = _folder(tmp_path / "d", {"bowl": 3, "cup": 3, "jug": 1, "vase": 0})
    (root / "bowl" / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n garbage")
    (root / "cup" / "empty.jpg").write_bytes(b"")
    (root / "vase" / "half.png").write_bytes(b"\x89PNG\r\n")
    assert main(["inspect", str(root)]) == 2
    captured = capsys.readouterr()
    out = captured.out
    assert re.search(r"^class +images +unreadable$", out, re.M)
    for name, usable, bad in (("bowl", 3, 1), ("cup", 3, 1), ("jug", 1, 0), ("vase", 0, 1)):
        assert re.search(rf"^{name} +{usable} +{bad}$", out, re.M), name
    assert out.index("class ") < out.index("problems that stop a search: 3")
    for path in ("bowl/broken.png", "cup/empty.jpg", "vase/half.png"):
        assert re.search(rf"^ +\S*{path} \(", out, re.M), path
    assert "1 class folder has no readable images: 'vase'" in out
    assert "class 'jug' has 1 image, fewer than the 2 folds asked for" in out
    assert captured.err == (f"error: {root}: 3 problems listed above under 'problems that "
                            "stop a search' stop a search on this data; fix them and inspect "
                            "again\n")


def test_inspect_bad_files_and_skip(tmp_path, capsys):
    """Unreadable files stop inspect (exit 2) unless --skip-bad, which counts them."""
    root = _folder(tmp_path / "d", {"bowl": 3, "cup": 3})
    (root / "bowl" / "broken.png").write_bytes(b"\x89PNG\r\n\x1a\n garbage")
    assert main(["inspect", str(root)]) == 2
    assert "1 unreadable image file; fix or remove them" in capsys.readouterr().out
    assert main(["inspect", str(root), "--skip-bad"]) == 0
    out = capsys.readouterr().out
    assert "skipped: 1 unreadable files" in out
    assert re.search(r"broken\.png \(cannot be decoded, truncated or corrupt", out)


def test_inspect_duplicates_and_sizes(tmp_path, capsys):
    """Duplicate groups and differing sizes appear in the summary."""
    root = _folder(tmp_path / "d", {"bowl": 3, "cup": 3})
    (root / "cup" / "copy.png").write_bytes((root / "bowl" / "0.png").read_bytes())
    Image.new("RGB", (40, 40), (9, 9, 9)).save(root / "cup" / "big.png")
    assert main(["inspect", str(root)]) == 0
    out = capsys.readouterr().out
    assert "duplicates: 0 groups within a class (0 extra copies), 1 groups across classes" in out
    assert "sizes seen: 10x10 (7), 40x40 (1)" in out
    assert "  - serious: 1 group of identical images carry different classes" in out
    assert "  - image sizes lie far apart" in out


def test_inspect_builtin_and_npz(tmp_path, capsys):
    """Built-in tiles and a .npz are inspected; a missing path is exit 2 with the kinds listed."""
    assert main(["inspect", "builtin:tiles?n=4&size=16"]) == 0
    out = capsys.readouterr().out
    assert "images: 32 usable in 8 classes, stored as 16x16 RGB" in out
    assert "most folds: 4" in out
    path = tmp_path / "a.npz"
    np.savez(path, x=np.zeros((4, 3, 3), np.uint8) + np.arange(4)[:, None, None].astype(np.uint8),
             y=np.array([0, 1, 0, 1]), classes=np.array(["no", "yes"]))
    assert main(["inspect", str(path)]) == 0
    out = capsys.readouterr().out
    assert "colour kinds: grey uint8 (4)" in out and re.search(r"^yes +2$", out, re.M)
    assert main(["inspect", str(tmp_path / "missing")]) == 2
    assert "no such file or folder; give a folder" in capsys.readouterr().err
