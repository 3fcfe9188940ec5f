"""Tests of the report's figure functions and their numbers, on plain data."""

from __future__ import annotations

import io
import json

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from PIL import Image

from tinyconv.report.axes import png_bytes, si, spans_decades
from tinyconv.report.boxes import fold_boxes
from tinyconv.report.budgets import axis_budget, budget_rows
from tinyconv.report.confusion import (confusion_counts, confusion_figure, per_class_table,
                                       row_rates, top_confusions)
from tinyconv.report.curves import history_of, learning_curves, mean_curves
from tinyconv.report.gallery import (confident_mistakes, confusion_examples,
                                     confusion_gallery, mistakes_gallery)
from tinyconv.report.html import png_size
from tinyconv.report.pareto import pareto_plot

K = 4
CLASSES = ("ring", "cross", "bar", "star")


def _valid_png(fig: Figure) -> tuple[int, int]:
    """Render with Agg, decode with Pillow, return the pixel size."""
    assert isinstance(fig, Figure)
    data = png_bytes(fig)
    with Image.open(io.BytesIO(data)) as im:
        im.verify()  # Pillow's own PNG integrity check (chunk CRCs)
    with Image.open(io.BytesIO(data)) as im:
        assert im.format == "PNG"
        return im.size


def _ranking(params=(300, 2_000, 15_000, 90_000), macs=(5e4, 3e5, 2e6, 1e7)) -> pd.DataFrame:
    acc = np.array([0.55, 0.82, 0.86, 0.87])
    se = np.array([0.02, 0.015, 0.01, 0.012])
    return pd.DataFrame({
        "candidate": [f"16x16rgb/c{i}k3" for i in range(len(params))],
        "params": params, "macs": macs, "acc_mean": acc, "acc_se": se,
        "pareto_params": [True, True, True, True], "pareto_macs": [True, True, False, True],
        "pick": [False, False, True, False], "within_1se": [False, False, True, True],
    })


def _folds(ranking: pd.DataFrame, k: int = 3, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for _, r in ranking.iterrows():
        for f in range(k):
            v = r["acc_mean"] + rng.normal(0, 0.01)
            rows.append({"candidate": r["candidate"], "params": r["params"], "fold": f,
                         "held_acc": v, "train_acc": v + 0.05})
    return pd.DataFrame(rows)


def test_fold_boxes_renders_and_uses_log_axis_when_counts_span_decades():
    """Fold boxes render to a valid PNG; a 300x spread of counts gets a log parameter axis."""
    r = _ranking()
    fig = fold_boxes(_folds(r), chance=1 / K, pick=r["candidate"][2])
    w, h = _valid_png(fig)
    assert w > 600 and h > 400
    assert "log scale" in fig.axes[0].get_xlabel()


def test_fold_boxes_falls_back_to_even_spacing_for_close_counts():
    """Counts within one decade are spaced evenly, labelled by count, in parameter order."""
    r = _ranking(params=(900, 1_000, 1_200, 3_000))
    fig = fold_boxes(_folds(r.iloc[::-1]), chance=1 / K)
    ax = fig.axes[0]
    assert "log" not in ax.get_xlabel()
    assert [t.get_text() for t in ax.get_xticklabels()] == ["900", "1k", "1.2k", "3k"]
    _valid_png(fig)


def test_fold_boxes_refuses_empty_input():
    """No fold rows is an error saying what is needed."""
    with pytest.raises(ValueError, match="at least one"):
        fold_boxes(pd.DataFrame(columns=["candidate", "params", "fold", "held_acc", "train_acc"]))


@pytest.mark.parametrize("axis,budget", [("params", 50_000.0), ("macs", 5e6)])
def test_pareto_plot_draws_budget_band_and_chance(axis, budget):
    """The Pareto plot has a vertical budget line at the budget and a chance line at 1/K."""
    fig = pareto_plot(_ranking(), axis, budget=budget, chance=1 / K)
    ax = fig.axes[0]
    vertical = [ln for ln in ax.lines if len(set(ln.get_xdata())) == 1]
    horizontal = [ln for ln in ax.lines if len(set(ln.get_ydata())) == 1
                  and len(set(ln.get_xdata())) > 1]
    assert any(float(ln.get_xdata()[0]) == budget for ln in vertical)
    assert any(float(ln.get_ydata()[0]) == pytest.approx(1 / K) for ln in horizontal)
    # the one-SE threshold (best mean minus its SE) is drawn too
    assert any(float(ln.get_ydata()[0]) == pytest.approx(0.87 - 0.012) for ln in horizontal)
    assert ax.get_xscale() == "log"
    _valid_png(fig)


def test_pareto_points_carry_names_with_a_key():
    """Front, pick and best points carry their label; the key under the axes names each."""
    r = _ranking()
    names = {c: str(i) for i, c in enumerate(r["candidate"], 1)}
    fig = pareto_plot(r, "macs", names=names)
    ax, key = fig.axes[0], fig.axes[1]
    labels = sorted(t.get_text() for t in ax.texts if t.get_text().isdigit())
    # on the MACs front: 1, 2 and 4; 3 is off it but is the pick; 4 is also the best
    assert labels == ["1", "2", "3", "4"]
    assert [t.get_text().split() for t in key.texts] == [[n, c] for c, n in names.items()]
    r.loc[0, "pareto_macs"] = False                      # off the front, not pick nor best
    fig = pareto_plot(r, "macs", names=names)
    assert "1" not in [t.get_text() for t in fig.axes[0].texts]
    _valid_png(fig)


def test_pareto_plot_rejects_unknown_axis():
    """Only params and MACs are size axes."""
    with pytest.raises(ValueError, match="'params' or 'macs'"):
        pareto_plot(_ranking(), "flash")


def test_history_of_reads_stored_json_and_tolerates_gaps():
    """Stored JSON histories parse to lists; missing or broken ones give an empty dict."""
    text = json.dumps({"held_acc": [0.1, 0.2], "train_acc": [0.2, None]})
    h = history_of(text)
    assert h["held_acc"] == [0.1, 0.2] and np.isnan(h["train_acc"][1])
    assert history_of(None) == {} and history_of("not json") == {} and history_of(3) == {}


def test_mean_curves_average_over_folds_and_align_resumed_units():
    """Rung curves are per-epoch means over folds; a shorter stored history ends at its epochs."""
    units = pd.DataFrame([
        {"rung": 0, "epochs": 2, "history": {"held_acc": [0.2, 0.4]}},
        {"rung": 0, "epochs": 2, "history": {"held_acc": [0.4, 0.6]}},
        {"rung": 1, "epochs": 6, "history": {"held_acc": [0.7, 0.8]}},   # resumed: epochs 5-6
    ])
    out = mean_curves(units, "held_acc")
    np.testing.assert_array_equal(out[0][0], [1, 2])
    np.testing.assert_allclose(out[0][1], [0.3, 0.5])
    np.testing.assert_array_equal(out[1][0], [5, 6])


def test_learning_curves_render_with_and_without_history():
    """Learning curves render; a finalist without stored history gets a visible note."""
    hist = json.dumps({"held_acc": [0.3, 0.5, 0.6], "train_acc": [0.3, 0.6, 0.8]})
    units = pd.DataFrame([{"candidate": "a", "fold": f, "rung": r, "epochs": 3, "history": hist}
                          for f in range(3) for r in (0, 1)]
                         + [{"candidate": "b", "fold": 0, "rung": 0, "epochs": 3,
                             "history": "{}"}])
    fig = learning_curves(units, ["a", "b"], chance=1 / K, pick="a")
    texts = [t.get_text() for ax in fig.axes for t in ax.texts]
    assert "no per-epoch history stored" in texts
    _valid_png(fig)
    with pytest.raises(ValueError, match="at least one finalist"):
        learning_curves(units, [])


def test_learning_curve_panels_name_pick_and_best_in_full_and_count_rungs_from_1():
    """Long texts are wrapped, not cut; the pick and the best say so; rung 0 is 'rung 1';
    the folds' range of held-out accuracy is shaded."""
    from matplotlib.collections import PolyCollection

    long_pick = "32x32rgb/c4k3-p2-c8k3-p2-c16k3-p2-c32k3-p2-gap-d64"
    long_best = "32x32rgb/c4k3-p2-c8k3-p2-c16k3-p2-c32k3-p2-d64"
    from tinyconv.report.curves import HELD_OUT_KEY, TRAINING_KEY
    hist = [json.dumps({HELD_OUT_KEY: [0.2 + f / 10, 0.4 + f / 10], TRAINING_KEY: [0.3, 0.6]})
            for f in range(3)]
    units = pd.DataFrame([{"candidate": c, "fold": f, "rung": 0, "epochs": 2, "history": hist[f]}
                          for c in (long_pick, long_best) for f in range(3)])
    fig = learning_curves(units, [long_pick, long_best], pick=long_pick, best=long_best)
    titles = [ax.get_title(loc="left") for ax in fig.axes if ax.get_visible()]
    assert titles[0].startswith("\u2605 the pick\n") and titles[1].startswith("the best")
    for text, title in zip((long_pick, long_best), titles):
        assert title.split("\n", 1)[1].replace("\n", "") == text and "\u2026" not in title
    legend = [t.get_text() for lg in fig.legends for t in lg.get_texts()]
    assert "rung 1 (2 epochs)" in legend and "held-out, range over folds" in legend
    band = [c for c in fig.axes[0].collections if isinstance(c, PolyCollection)][0]
    ys = band.get_paths()[0].vertices[:, 1]
    assert ys.min() == pytest.approx(0.2) and ys.max() == pytest.approx(0.6)  # folds 0 and 2
    _valid_png(fig)


def _predictions(n=200, seed=1):
    rng = np.random.default_rng(seed)
    labels = rng.integers(0, K, n)
    preds = np.where(rng.random(n) < 0.3, rng.integers(0, K, n), labels)
    probs = rng.dirichlet(np.ones(K), n)
    return labels, preds, probs


def test_confusion_counts_and_per_class_match_scikit_learn():
    """Counts, precision and recall equal scikit-learn's confusion_matrix and scores."""
    from sklearn.metrics import confusion_matrix, precision_score, recall_score

    labels, preds, _ = _predictions()
    counts = confusion_counts(labels, preds, K)
    # reference: sklearn.metrics.confusion_matrix (rows true, columns predicted)
    np.testing.assert_array_equal(counts, confusion_matrix(labels, preds, labels=range(K)))
    table = per_class_table(counts, CLASSES)
    np.testing.assert_allclose(table["precision"], precision_score(labels, preds, average=None,
                                                                   labels=range(K)))
    np.testing.assert_allclose(table["recall"], recall_score(labels, preds, average=None,
                                                             labels=range(K)))
    np.testing.assert_allclose(row_rates(counts).sum(axis=1), 1.0)
    _valid_png(confusion_figure(counts, CLASSES))


def test_per_class_precision_of_a_never_predicted_class_is_undefined():
    """A class nobody predicts has precision NaN (undefined), not zero."""
    counts = confusion_counts(np.array([0, 1, 2]), np.array([0, 0, 0]), 3)
    table = per_class_table(counts, ("a", "b", "c"))
    assert np.isnan(table["precision"][1]) and table["recall"][1] == 0.0


def test_confusion_counts_refuse_out_of_range_classes():
    """A prediction outside 0..K-1 is refused with the range."""
    with pytest.raises(ValueError, match=r"outside 0\.\.2"):
        confusion_counts(np.array([0, 1]), np.array([0, 3]), 3)


def test_top_confusions_worked_example():
    """Off-diagonal cells come largest first, ties by (true, predicted)."""
    counts = np.array([[9, 3, 1], [3, 7, 0], [0, 5, 4]])
    assert top_confusions(counts, 3) == [(2, 1, 5), (0, 1, 3), (1, 0, 3)]


def test_confident_mistakes_are_the_most_probable_wrong_answers():
    """The mistakes list equals a brute-force sort of wrong answers by confidence."""
    labels, preds, probs = _predictions()
    conf = probs[np.arange(len(preds)), preds]
    got = confident_mistakes(labels, preds, conf, 10)
    wrong = [i for i in range(len(labels)) if labels[i] != preds[i]]
    expect = sorted(wrong, key=lambda i: (-conf[i], i))[:10]
    assert list(got) == expect


def test_galleries_render_real_pixels():
    """Both galleries render; grey and colour images are both accepted."""
    labels, preds, probs = _predictions(60)
    conf = probs[np.arange(60), preds]
    rng = np.random.default_rng(2)
    for c in (1, 3):
        images = rng.integers(0, 256, (60, 8, 8, c), dtype=np.uint8)
        pairs = top_confusions(confusion_counts(labels, preds, K), 3)
        ex = confusion_examples(labels, preds, conf, pairs, 4)
        assert all(len(e[3]) <= 4 and np.all(labels[e[3]] == e[0]) for e in ex)
        _valid_png(confusion_gallery(images, ex, CLASSES, confidence=conf))
        _valid_png(mistakes_gallery(images, confident_mistakes(labels, preds, conf, 7),
                                    labels, preds, conf, CLASSES))


def test_png_size_reads_the_header_like_pillow():
    """The PNG header reader gives Pillow's size and refuses other bytes."""
    data = png_bytes(fold_boxes(_folds(_ranking())))
    with Image.open(io.BytesIO(data)) as im:
        assert png_size(data) == im.size
    with pytest.raises(ValueError, match="not a PNG"):
        png_size(b"GIF89a" + bytes(30))


def test_number_format_and_log_decision():
    """Tick labels are compact and round; log scale starts at one decade of spread."""
    assert [si(v) for v in (152, 199.99999999, 1000, 1500, 46_000, 1.2e6)] == [
        "152", "200", "1k", "1.5k", "46k", "1.2M"]
    assert spans_decades([100, 1000]) and not spans_decades([100, 999])


def test_budget_rows_compare_the_pick_in_the_budget_unit():
    """Budgets are listed with the pick's figure, its share and whether it fits."""
    pick = pd.Series({"params": 1_500, "macs": 2e5, "peak_kb": 10.0, "flash_kb": 80.0})
    rows = budget_rows({"max_params": 2_000, "max_flash_kb": 64.0, "max_macs": None},
                       pick, {"max_params": 3})
    assert list(rows["budget"]) == ["max_params", "max_flash_kb"]
    assert rows["share"].tolist() == pytest.approx([0.75, 1.25])
    assert rows["within"].tolist() == [True, False]
    assert rows["removed"].tolist() == [3, 0]
    assert axis_budget({"max_macs": 5_000}, "macs") == 5_000
    assert axis_budget({"max_flash_kb": 64}, "params") is None


def test_galleries_show_the_network_view_beside_each_image():
    """Each thumbnail pairs a 32x32 colour image with its 16x16 grey view at the same height."""
    from tinyconv.arch import InputSpec
    from tinyconv.data import prepare
    from tinyconv.quant import as_pixels
    from tinyconv.report.gallery import PAIR_GAP, network_view, side_by_side, thumbnail

    rng = np.random.default_rng(4)
    images = rng.integers(0, 256, (6, 32, 32, 3), dtype=np.uint8)
    spec = InputSpec(16, 16, "gray")
    view = network_view(images, spec)
    np.testing.assert_array_equal(view, as_pixels(prepare(images, spec)))
    assert view.shape == (6, 16, 16, 1)
    left = thumbnail(images[0])                        # 96 x 96: 32 enlarged 3 times
    pair = side_by_side(images[0], view[0])
    assert pair.shape == (96, 96 + PAIR_GAP + 96, 3)
    np.testing.assert_array_equal(pair[:, :96], left)
    right = pair[:, 96 + PAIR_GAP:]
    np.testing.assert_array_equal(right[::6, ::6, 0], view[0][..., 0])   # 16 enlarged 6 times
    assert (right[..., 0] == right[..., 2]).all()                       # grey
    # ycc is not viewable as colours: the view is the resized RGB
    ycc = network_view(images, InputSpec(16, 16, "ycc"))
    np.testing.assert_array_equal(ycc, as_pixels(prepare(images, InputSpec(16, 16, "rgb"))))
    labels, preds = np.arange(6) % K, (np.arange(6) + 1) % K
    fig = mistakes_gallery(images, np.arange(6), labels, preds, np.full(6, 0.9), CLASSES,
                           seen=dict(enumerate(view)), seen_as="16x16 gray")
    assert any("as the network saw it (16x16 gray)" in t.get_text() for t in fig.texts)
    _valid_png(fig)


def test_png_bytes_are_opaque_rgb_and_lay_see_through_pixels_over_white():
    """Figures are written as 8-bit RGB; a see-through background comes out white."""
    from matplotlib.patches import Rectangle

    fig = Figure(figsize=(1, 1), dpi=50)
    fig.patch.set_alpha(0.0)                              # a see-through background
    fig.add_artist(Rectangle((0, 0), 0.5, 1, color="black", transform=fig.transFigure))
    with Image.open(io.BytesIO(png_bytes(fig))) as im:
        assert im.mode == "RGB" and im.size == (50, 50)
        px = np.asarray(im)
    assert (px[2:-2, 2:20] == 0).all()                    # the black left half (inside its edge)
    assert (px[:, 30:] == 255).all()                      # the rest white, not black
