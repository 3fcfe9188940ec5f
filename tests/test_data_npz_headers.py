"""Tests of tinyconv/data/npz_headers.py: hostile .npz files refused before allocation."""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np
import pytest

from run_folders import clean_failure
from tinyconv.cli import main
from tinyconv.data import load_data
from tinyconv.data.npz_headers import MAX_IMAGE_BYTES, MAX_SIDE
from tinyconv.errors import DataError


def _npy(header: str, payload: bytes = b"") -> bytes:
    """A version 1.0 .npy file with the given header text, laid out as NumPy's format
    description says: magic, version, little-endian header length, the header padded
    with spaces to a multiple of 64 bytes and ended by a newline, then the data."""
    text = header.encode("latin1")
    pad = 64 - (10 + len(text) + 1) % 64
    text += b" " * (pad % 64) + b"\n"
    return b"\x93NUMPY\x01\x00" + len(text).to_bytes(2, "little") + text + payload


def _header(descr: str, shape: str) -> str:
    return f"{{'descr': {descr!r}, 'fortran_order': False, 'shape': {shape}, }}"


def _archive(path: Path, members: dict[str, bytes]) -> Path:
    with zipfile.ZipFile(path, "w") as zf:
        for name, data in members.items():
            zf.writestr(f"{name}.npy", data)
    return path


def _labels(n: int) -> bytes:
    return _npy(_header("<i8", f"({n},)"), (np.arange(n) % 2).astype("<i8").tobytes())


def test_format_helper_matches_numpy(tmp_path):
    """The hand-made .npy layout is the one NumPy reads (numpy.load as the reference)."""
    x = np.arange(24, dtype=np.uint8).reshape(2, 3, 4)
    path = _archive(tmp_path / "ok.npz", {"x": _npy(_header("|u1", "(2, 3, 4)"), x.tobytes()),
                                          "y": _labels(2)})
    with np.load(path) as z:
        np.testing.assert_array_equal(z["x"], x)


HOSTILE = {
    "huge shape": ({"x": _npy(_header("|u1", "(1000000000, 1000, 1000, 3)")), "y": _labels(2)},
                   r"array 'x' declares the shape \(1000000000, 1000, 1000, 3\) of uint8, "
                   r"3,000,000,000,000,000 bytes, more than the limit of "
                   + f"{MAX_IMAGE_BYTES:,}"),
    "short file": ({"x": _npy(_header("|u1", "(1000, 64, 64, 3)"), b"\0" * 100),
                    "y": _labels(1000)},
                   r"array 'x' declares the shape \(1000, 64, 64, 3\) of uint8 \(12,288,000 "
                   r"bytes\), but its file in the archive holds only 100 bytes"),
    "huge side": ({"x": _npy(_header("|u1", "(2, 50000, 50000)")), "y": _labels(2)},
                  rf"images of 50000 x 50000 pixels, more than the limit of {MAX_SIDE} pixels"),
    "bogus dtype": ({"x": _npy(_header("<q8x", "(2, 8, 8)")), "y": _labels(2)},
                    r"the header of array 'x' cannot be read \(ValueError: descr is not a "
                    r"valid dtype descriptor"),
    "broken header": ({"x": _npy("{'descr': '|u1', 'fortran_order': False, 'shape': (2,, }"),
                       "y": _labels(2)},
                      r"the header of array 'x' cannot be read \(TokenError"),
    "negative shape": ({"x": _npy(_header("|u1", "(-1, 8, 8)")), "y": _labels(2)},
                       r"array 'x' declares the shape \(-1, 8, 8\), with a negative size"),
    "object labels": ({"x": _npy(_header("|u1", "(2, 8, 8)"), b"\0" * 128),
                       "y": _npy(_header("|O", "(2,)"), b"\0" * 16)},
                      r"array 'y' has dtype object, which holds Python objects"),
    "long class names": ({"x": _npy(_header("|u1", "(2, 8, 8)"), b"\0" * 128),
                          "y": _labels(2), "classes": _npy(_header("<U100000", "(2,)"))},
                         r"array 'classes' holds names of up to 100,000 characters, more than "
                         r"the limit of 256"),
}


@pytest.mark.parametrize("kind", list(HOSTILE))
def test_hostile_headers_are_refused_before_loading(kind, tmp_path):
    """Each hostile header is a DataError naming the array and the limit or rule."""
    members, message = HOSTILE[kind]
    path = _archive(tmp_path / "hostile.npz", members)
    with pytest.raises(DataError, match=message):
        load_data(path)


def test_huge_label_is_refused_before_counting(tmp_path):
    """A label of 10**12 among three images names the label and the rule (no MemoryError)."""
    path = tmp_path / "labels.npz"
    np.savez(path, x=np.zeros((3, 8, 8), np.uint8), y=np.array([0, 1, 10**12]))
    with pytest.raises(DataError, match=r"labels.npz: y: the largest label is "
                                        r"1,000,000,000,000, but there are only 3 labels"):
        load_data(path)


def test_extra_arrays_are_never_loaded(tmp_path):
    """An array other than x, y and classes is ignored, even one declaring a huge shape."""
    x = np.random.default_rng(0).integers(0, 256, (4, 8, 8), dtype=np.uint8)
    path = _archive(tmp_path / "extra.npz", {
        "x": _npy(_header("|u1", "(4, 8, 8)"), x.tobytes()), "y": _labels(4),
        "junk": _npy(_header("<f8", "(100000000000,)"))})
    data = load_data(path)
    np.testing.assert_array_equal(data.images[..., 0], x)


def test_command_line_shows_one_error_line(tmp_path, capsys):
    """The inspect command on a hostile file exits 2 with one error line, no traceback."""
    members, _ = HOSTILE["huge shape"]
    path = _archive(tmp_path / "hostile.npz", members)
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert clean_failure(err) and "array 'x' declares the shape" in err
