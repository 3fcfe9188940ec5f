"""Image-folder intake: every kind of messy file gets its behaviour and message."""

from __future__ import annotations

import io
import re
import warnings
from pathlib import Path

import numpy as np
import pytest
from PIL import Image

from tinyconv.data import DataNote, DataWarning, LeakageWarning, load_data, load_with_intake
from tinyconv.data.images import read_image
from tinyconv.data.validate import check_folds
from tinyconv.errors import DataError

# notes about ignored files are checked in their own test
pytestmark = pytest.mark.filterwarnings("ignore::tinyconv.data.DataNote")


def _rgb(rng: np.random.Generator, h: int = 16, w: int = 16) -> Image.Image:
    return Image.fromarray(rng.integers(0, 256, (h, w, 3), dtype=np.uint8))


def _jpeg_bytes(img: Image.Image) -> bytes:
    buf = io.BytesIO()
    img.save(buf, "JPEG")
    return buf.getvalue()


def make_messy(root: Path, *, bad: bool = True, empty: bool = True) -> Path:
    """A class folder tree with every awkward case the loader must handle."""
    rng = np.random.default_rng(0)
    for name in ("ring", "cross", "small"):
        (root / name).mkdir(parents=True)
    for i in range(4):
        _rgb(rng).save(root / "ring" / f"r{i}.png")
    (root / "ring" / "notes.txt").write_text("camera settings")
    (root / "ring" / ".DS_Store").write_bytes(b"\x00\x01")
    (root / ".hidden_dir").mkdir()
    # CMYK JPEG of pure red (C=0, M=Y=255, K=0)
    Image.new("CMYK", (16, 16), (0, 255, 255, 0)).save(root / "cross" / "cmyk.jpg")
    # palette PNG: entry 0 (red) transparent, entry 1 blue on the left half
    pal = Image.new("P", (16, 16), 0)
    pal.putpalette([255, 0, 0, 0, 0, 255] + [0] * 762)
    pal.paste(1, (0, 0, 8, 16))
    pal.save(root / "cross" / "palette.png", transparency=0)
    # 16-bit greyscale PNG: values 0, 257, ..., 255 * 257
    Image.fromarray(np.arange(256, dtype=np.uint16).reshape(16, 16) * 257).save(
        root / "cross" / "grey16.png")
    for i in range(2):
        _rgb(rng).save(root / "small" / f"s{i}.bmp")
    if bad:
        data = _jpeg_bytes(_rgb(rng))
        (root / "ring" / "truncated.jpg").write_bytes(data[: len(data) // 2])
        (root / "cross" / "zero.png").write_bytes(b"")
    if empty:
        (root / "empty").mkdir()
    return root


def test_unreadable_files_all_listed_at_once(tmp_path):
    """A truncated JPEG and a zero-byte PNG are both named in one error, with the fix."""
    root = make_messy(tmp_path / "d", empty=False)
    with pytest.raises(DataError, match=r"(?s)2 unreadable image files; fix or remove them, "
                       r"or pass skip_bad \(--skip-bad\) to leave them out:"
                       r"(?=.*\n    \S*truncated\.jpg \(cannot be decoded, truncated or corrupt)"
                       r"(?=.*\n    \S*zero\.png \(the file is empty \(0 bytes\)\))"):
        load_data(root)


def test_every_problem_is_found_in_one_pass(tmp_path):
    """Bad files, an empty class folder and a class too small for the folds: one error."""
    root = make_messy(tmp_path / "d")
    with pytest.raises(DataError) as caught:
        load_data(root, folds=3)
    text = str(caught.value)
    assert text.startswith(f"{root}: 3 problems stop a search on this data; fix them all")
    assert "\n  - 2 unreadable image files; fix or remove them" in text
    assert "truncated.jpg (cannot be decoded" in text and "zero.png (the file is empty" in text
    assert "\n  - 1 class folder has no readable images: 'empty'" in text
    assert "\n  - class 'small' has 2 images, fewer than the 3 folds asked for" in text


def test_survey_keeps_the_inventory_beside_the_problems(tmp_path):
    """A survey of a folder with problems still holds every class, its counts and bad files."""
    from tinyconv.data import survey
    root = make_messy(tmp_path / "d")
    found = survey(root, folds=3)
    assert found.classes == ("cross", "empty", "ring", "small")
    assert found.counts == (3, 0, 4, 2)
    assert found.unreadable_in("ring") == 1 and found.unreadable_in("cross") == 1
    assert found.dataset is not None and found.dataset.n == 9 and len(found.problems) == 3


def test_pillow_warnings_become_notes(tmp_path, monkeypatch):
    """Pillow's decompression-bomb warning is kept as a note naming the file, not a warning."""
    rng = np.random.default_rng(2)
    for c in ("a", "b"):
        (tmp_path / c).mkdir()
        for i in range(2):
            _rgb(rng).save(tmp_path / c / f"{i}.png")
    _rgb(rng, 40, 40).save(tmp_path / "b" / "big.png")
    # Pillow warns above MAX_IMAGE_PIXELS and refuses above twice that (Pillow documentation)
    monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", 1000)
    with warnings.catch_warnings(record=True) as shown:
        warnings.simplefilter("always")
        ds = load_data(tmp_path)
    assert not [w for w in shown if issubclass(w.category, Image.DecompressionBombWarning)]
    assert any(w.startswith("note: 1 image holds more pixels than Pillow's safety limit "
                            "(1,000 pixels)") and "b/big.png" in w for w in ds.warnings)


def test_skip_bad_skips_and_counts(tmp_path):
    """With skip_bad the bad files are left out, listed in skipped and warned about."""
    root = make_messy(tmp_path / "d", empty=False)
    with pytest.warns(DataWarning, match=r"skipped 2 unreadable image files"):
        ds = load_data(root, skip_bad=True)
    assert sorted(Path(p).name for p in ds.skipped) == ["truncated.jpg", "zero.png"]
    assert ds.n == 4 + 3 + 2
    assert any(w.startswith("skipped 2 unreadable") for w in ds.warnings)


def test_empty_class_folder_is_refused(tmp_path):
    """An empty class folder is an error naming the folder and the fix."""
    root = make_messy(tmp_path / "d", bad=False)
    with pytest.raises(DataError, match=r"1 class folder has no readable images: 'empty'; "
                       r"add PNG, JPEG, BMP or GIF images to it, or remove the folder"):
        load_data(root)


def test_hidden_and_non_image_files_are_noted(tmp_path):
    """Hidden entries and the .txt file are ignored with notes, recorded in the data set."""
    root = make_messy(tmp_path / "d", bad=False, empty=False)
    with pytest.warns(DataNote) as record:
        ds = load_data(root)
    texts = [str(w.message) for w in record if issubclass(w.category, DataNote)]
    assert "note: ignored 2 hidden entries: .hidden_dir, ring/.DS_Store" in texts
    assert any(re.match(r"note: ignored 1 non-image file .*: ring/notes\.txt", t) for t in texts)
    assert set(texts) <= set(ds.warnings)
    assert all(not p.endswith((".txt", ".DS_Store")) for p in ds.paths)


def test_cmyk_jpeg_becomes_rgb(tmp_path):
    """A CMYK JPEG of pure red reads as RGB close to (255, 0, 0)."""
    root = make_messy(tmp_path / "d", bad=False, empty=False)
    pixels, kind = read_image(root / "cross" / "cmyk.jpg")
    assert kind == "CMYK" and pixels.shape == (16, 16, 3)
    assert np.abs(pixels.astype(int) - [255, 0, 0]).max() <= 3  # JPEG is lossy


def test_palette_with_transparency_composited_over_white(tmp_path):
    """Transparent palette pixels become white; opaque ones keep their palette colour."""
    root = make_messy(tmp_path / "d", bad=False, empty=False)
    pixels, kind = read_image(root / "cross" / "palette.png")
    assert kind == "palette+alpha"
    assert (pixels[:, :8] == [0, 0, 255]).all()
    assert (pixels[:, 8:] == [255, 255, 255]).all()


def test_16bit_grey_scaled_to_8bit(tmp_path):
    """16-bit grey v*257 reads back as v (65535 -> 255), one channel."""
    root = make_messy(tmp_path / "d", bad=False, empty=False)
    pixels, kind = read_image(root / "cross" / "grey16.png")
    assert kind == "grey 16-bit" and pixels.shape == (16, 16, 1)
    np.testing.assert_array_equal(pixels[..., 0], np.arange(256).reshape(16, 16))


def test_mixed_folder_loads_as_rgb_with_kinds(tmp_path):
    """The clean part of the folder loads as RGB; grey images are repeated to three channels."""
    root = make_messy(tmp_path / "d", bad=False, empty=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataNote)
        ds, intake = load_with_intake(root)
    assert ds.classes == ("cross", "ring", "small")
    assert ds.images.shape == (9, 16, 16, 3) and ds.images.dtype == np.uint8
    np.testing.assert_array_equal(ds.class_counts, [3, 4, 2])
    grey = ds.images[ds.paths.index(str(root / "cross" / "grey16.png"))]
    assert (grey[..., 0] == grey[..., 2]).all()
    assert dict(intake.kinds) == {"RGB": 6, "CMYK": 1, "grey 16-bit": 1, "palette+alpha": 1}


def test_class_with_two_images_limits_folds(tmp_path):
    """Three folds are refused naming the 2-image class and the largest k that works (2)."""
    root = make_messy(tmp_path / "d", bad=False, empty=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", DataNote)
        ds = load_data(root)
    check_folds(ds.labels, 2, ds.classes)
    with pytest.raises(DataError, match=r"class 'small' has 2 images, fewer than the 3 folds "
                       r"asked for.*the largest number of folds that works is 2"):
        check_folds(ds.labels, 3, ds.classes)


def test_all_grey_keeps_one_channel(tmp_path):
    """When every image is grey the data set keeps a single channel."""
    rng = np.random.default_rng(1)
    for c in ("a", "b"):
        (tmp_path / c).mkdir()
        for i in range(2):
            Image.fromarray(rng.integers(0, 256, (8, 8), dtype=np.uint8)).save(
                tmp_path / c / f"{i}.png")
    ds = load_data(tmp_path)
    assert ds.images.shape == (4, 8, 8, 1)


def test_exif_orientation_applied(tmp_path):
    """An image tagged EXIF orientation 6 (rotate 90 clockwise) loads rotated."""
    a = np.zeros((4, 6, 3), dtype=np.uint8)
    a[0, 0] = 255                                   # top-left marker
    exif = Image.Exif()
    exif[0x0112] = 6                                # EXIF 2.3: 6 = rotate 90 CW to view
    Image.fromarray(a).save(tmp_path / "o.png", exif=exif)
    pixels, _ = read_image(tmp_path / "o.png")
    assert pixels.shape == (6, 4, 3)
    assert pixels[0, -1, 0] == 255                  # top-left moved to top-right


def test_gif_first_frame(tmp_path):
    """An animated GIF gives its first frame."""
    frames = [Image.new("RGB", (8, 8), (255, 0, 0)), Image.new("RGB", (8, 8), (0, 0, 255))]
    frames[0].save(tmp_path / "a.gif", save_all=True, append_images=frames[1:])
    pixels, _ = read_image(tmp_path / "a.gif")
    assert (np.abs(pixels.astype(int) - [255, 0, 0]) <= 2).all()


def test_sizes_far_apart_warn_and_resize(tmp_path):
    """Images far from the most common size draw a warning and are resized to it."""
    rng = np.random.default_rng(2)
    for c in ("a", "b"):
        (tmp_path / c).mkdir()
        for i in range(2):
            _rgb(rng, 12, 12).save(tmp_path / c / f"{i}.png")
    _rgb(rng, 40, 30).save(tmp_path / "a" / "big.png")
    with pytest.warns(DataWarning, match=r"image sizes lie far apart: 1 of 5 images differ from "
                      r"the most common size 12x12 .*big\.png \(40x30\); they are resized"):
        ds, intake = load_with_intake(tmp_path)
    assert ds.image_shape == (12, 12, 3)
    assert dict(intake.sizes) == {"12x12": 4, "40x30": 1}


def test_duplicates_within_and_across_classes(tmp_path):
    """A copy within a class warns; a copy across classes warns with the leakage reason."""
    rng = np.random.default_rng(3)
    for c in ("a", "b"):
        (tmp_path / c).mkdir()
    img = _rgb(rng)
    img.save(tmp_path / "a" / "1.png")
    img.save(tmp_path / "a" / "2.png")
    other = _rgb(rng)
    other.save(tmp_path / "a" / "3.png")
    other.save(tmp_path / "b" / "1.png")
    _rgb(rng).save(tmp_path / "b" / "2.png")
    with pytest.warns(DataWarning) as record:
        ds, intake = load_with_intake(tmp_path)
    within = [str(w.message) for w in record if w.category is DataWarning]
    across = [str(w.message) for w in record if w.category is LeakageWarning]
    assert re.match(r"1 group of identical images within a class \(1 extra copies\)", within[0])
    assert re.match(r"serious: 1 group of identical images carry different classes: .*3\.png = "
                    r".*1\.png\) in a/b; .*inflate cross-validated accuracy", across[0])
    assert len(intake.duplicates_within) == 1 and len(intake.duplicates_across) == 1
    assert len(ds.warnings) == 2


def test_single_class_refused(tmp_path):
    """A folder with one class folder is refused: a classifier needs two classes."""
    (tmp_path / "only").mkdir()
    _rgb(np.random.default_rng(4)).save(tmp_path / "only" / "1.png")
    with pytest.raises(DataError, match=r"found only class 'only'; a classifier needs at least "
                       "two classes"):
        load_data(tmp_path)


def test_folder_without_subfolders_refused(tmp_path):
    """Images directly in the root (no class sub-folders) are refused with the layout to use."""
    _rgb(np.random.default_rng(5)).save(tmp_path / "1.png")
    with pytest.raises(DataError, match=r"found 1 files but no sub-folders; an image folder "
                       "needs one sub-folder per class"):
        load_data(tmp_path)


def test_missing_path_refused(tmp_path):
    """A path that does not exist is an error listing what DATA can be."""
    with pytest.raises(DataError, match=r"nope: no such file or folder; give a folder with one "
                       r"sub-folder per class, a \.npz file"):
        load_data(tmp_path / "nope")


def test_alpha_composited_over_white(tmp_path):
    """RGBA and grey+alpha pixels are composited over white: out = a*c + (1-a)*255."""
    rgba = np.zeros((2, 2, 4), dtype=np.uint8)
    rgba[..., 0] = 200
    rgba[..., 3] = [[255, 0], [128, 64]]
    Image.fromarray(rgba, "RGBA").save(tmp_path / "a.png")
    pixels, kind = read_image(tmp_path / "a.png")
    alpha = rgba[..., 3] / 255.0
    # alpha compositing "over" a white background (Porter & Duff 1984)
    np.testing.assert_array_equal(pixels[..., 0], np.rint(200 * alpha + 255 * (1 - alpha)))
    np.testing.assert_array_equal(pixels[..., 1], np.rint(255 * (1 - alpha)))
    assert kind == "RGB+alpha"
    la = np.stack([np.full((2, 2), 10, np.uint8), rgba[..., 3]], axis=-1)
    Image.fromarray(la, "LA").save(tmp_path / "g.png")
    pixels, kind = read_image(tmp_path / "g.png")
    assert kind == "grey+alpha" and pixels.shape == (2, 2, 1)
    np.testing.assert_array_equal(pixels[..., 0], np.rint(10 * alpha + 255 * (1 - alpha)))


def test_large_photos_shrunk_while_reading(tmp_path):
    """Images over 256 pixels are shrunk by a whole factor (block means), with a note."""
    rng = np.random.default_rng(6)
    originals = {}
    for c in ("a", "b"):
        (tmp_path / c).mkdir()
        for i in range(2):
            a = rng.integers(0, 256, (600, 300, 3), dtype=np.uint8)
            Image.fromarray(a).save(tmp_path / c / f"{i}.png")
            originals[str(tmp_path / c / f"{i}.png")] = a
    with pytest.warns(DataNote, match=r"4 images larger than 256 pixels were shrunk by whole "
                      r"factors while reading"):
        ds, intake = load_with_intake(tmp_path)
    assert ds.image_shape == (200, 100, 3)                       # factor ceil(600 / 256) = 3
    a = originals[ds.paths[0]].astype(float)
    # 3 x 3 block means, computed independently with numpy
    ref = np.rint(a.reshape(200, 3, 100, 3, 3).mean(axis=(1, 3)))
    np.testing.assert_array_equal(ds.images[0], ref)
    assert dict(intake.sizes) == {"600x300": 4}


def test_skipped_paths_kept_whole(tmp_path):
    """A skipped file whose name holds ' (' is recorded by its full path."""
    rng = np.random.default_rng(7)
    for c in ("a", "b"):
        (tmp_path / c).mkdir()
        _rgb(rng).save(tmp_path / c / "ok.png")
    (tmp_path / "a" / "photo (1).png").write_bytes(b"")
    with pytest.warns(DataWarning, match=r"skipped 1 unreadable image file: .*photo \(1\)\.png "
                      r"\(the file is empty"):
        ds = load_data(tmp_path, skip_bad=True)
    assert ds.skipped == (str(tmp_path / "a" / "photo (1).png"),)
