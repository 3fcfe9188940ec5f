"""Tests of the page's words and markup, from plain run data (no store)."""

from __future__ import annotations

import json
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from tinyconv.report.html import Column, esc, num, page, pct, pvalue, table
from tinyconv.report.rundata import PickPredictions, RunData
from tinyconv.report.decision import (against_budget, decision_panel, fewer_parameters,
                                      pick_flags, why_pick)
from tinyconv.report.sections import units_summary
from tinyconv.report.writer import render_report

CLASSES = ("ring", "<b>cross</b> & co", "bar")


# The three finalists' architecture texts (their figures below are made up).
NAMES = {"a": "8x8gray/d4", "b": "8x8gray/c4k3-p2", "c": "8x8gray/c8k3-p2-c16k3-p2"}


def _run(pick_is_best: bool) -> RunData:
    """Three finalists; the pick is the smallest within one SE of the best."""
    accs = {"a": [0.80, 0.82, 0.81], "b": [0.86, 0.88, 0.87], "c": [0.85, 0.89, 0.93]}
    params = {"a": 500, "b": 2_000, "c": 9_000}
    if pick_is_best:
        accs["b"] = [0.95, 0.96, 0.97]
    rows, units = [], []
    for name, acc in accs.items():
        a = np.array(acc)
        rows.append({"candidate": NAMES[name], "params": params[name], "macs": 10 * params[name],
                     "peak_kb": 1.0, "flash_kb": params[name] / 1024, "rung": 1, "epochs": 4,
                     "folds": 3, "acc_mean": a.mean(), "acc_se": a.std(ddof=1) / np.sqrt(3),
                     "train_acc_mean": a.mean() + 0.05, "gap": 0.05,
                     "acc_per_kparam": (a.mean() - 1 / 3) / (params[name] / 1000),
                     "p_vs_best": 0.04, "finalist": True})
        for f, v in enumerate(acc):
            units.append({"candidate": NAMES[name], "fold": f, "rung": 1, "epochs": 4,
                          "status": "done", "held_acc": v, "train_acc": v + 0.05,
                          "history": json.dumps({"held_acc": [v / 2, v], "train_acc": [v / 2, v]})})
    r = pd.DataFrame(rows)
    best = int(r["acc_mean"].idxmax())
    r.loc[best, "p_vs_best"] = np.nan
    r["within_1se"] = r["acc_mean"] >= r["acc_mean"][best] - r["acc_se"][best]
    r["pick"] = False
    r.loc[r[r["within_1se"]]["params"].idxmin(), "pick"] = True
    r["pareto_params"] = r["pareto_macs"] = True
    r["rank_per_param"] = r["acc_per_kparam"].rank(ascending=False).astype(int)
    r["rank_accuracy"] = r["acc_mean"].rank(ascending=False).astype(int)
    rng = np.random.default_rng(0)
    n = 30
    label = np.arange(n) % 3
    pred = np.where(rng.random(n) < 0.3, (label + 1) % 3, label)
    probs = rng.dirichlet(np.ones(3), n)
    preds = PickPredictions(fold=np.arange(n) % 3, index=np.arange(n), label=label, pred=pred,
                            probs=probs)
    images = rng.integers(0, 256, (n, 8, 8, 1), dtype=np.uint8)
    config = {"data": "arrays.npz", "classes": list(CLASSES), "folds": 3,
              "budget": {"max_params": 10_000, "max_macs": None}}
    return RunData(run_dir=Path("run"), config=config, classes=CLASSES, ranking=r,
                   units=pd.DataFrame(units), predictions=preds, images=images)


def test_why_pick_gives_the_rule_the_bar_and_the_trade():
    """The reason names the rule, the best, the bar (best minus SE) and the size saving."""
    data = _run(pick_is_best=False)
    best, pick = data.best, data.pick
    assert pick["candidate"] == NAMES["b"] and best["candidate"] == NAMES["c"]
    text = why_pick(data)
    bar = best["acc_mean"] - best["acc_se"]
    assert "one-standard-error rule" in text and f"the bar is {100 * bar:.1f}%" in text
    assert "4.5 times fewer" in text          # 9,000 / 2,000 parameters
    assert "2 of the 3 finalists clear it" in text and "p = 0.040" in text


@pytest.mark.parametrize("pick,best,words", [
    (2_000, 9_000, "4.5 times fewer"), (18_000, 19_080, "1,080 fewer, 6% less"),
    (5_000, 9_000, "4,000 fewer, 44% less"), (700, 700, "the same number"),
])
def test_fewer_parameters_in_plain_words(pick, best, words):
    """A ratio near 1 reads as a count and a percentage, never as '1.0 times fewer'."""
    assert fewer_parameters(pick, best) == words


def test_the_card_shows_each_cost_against_its_budget_and_points_to_the_cautions():
    """Tiles give each figure's share of its budget (or say none is set); a link leads to
    the cautions section."""
    data = _run(pick_is_best=False)
    html = decision_panel(data)
    assert f"{100 * 2_000 / 10_000:.0f}% of the 10,000 budget" in html   # max_params
    assert html.count("no budget set") == 3             # MACs, flash, peak: no limit given
    assert '<a href="#cautions">' in html
    assert against_budget(20.0, 256, " KB") == "8% of the 256 KB budget"


def test_why_pick_when_the_best_is_also_the_smallest():
    """When the best is the only one within one SE, the reason says so."""
    text = why_pick(_run(pick_is_best=True))
    assert "the best is itself the smallest of them (2,000 parameters)" in text


def test_why_pick_names_the_measure_the_run_chose():
    """A run that picked by flash says so and compares the flash of the pick and the best."""
    data = _run(pick_is_best=False)
    data.config["simplest_by"] = "flash"
    text = why_pick(data)
    assert "picks the candidate with the least flash (int8) among those" in text
    assert "--simplest-by flash" in text
    assert "KB of flash against the best's" in text


def test_page_escapes_names_from_the_run(tmp_path, monkeypatch):
    """Class names and texts from the run appear escaped, never as markup."""
    import io

    from PIL import Image

    import tinyconv.report.assemble as assemble

    # The figures are checked elsewhere; here a 1x1 PNG stands in for each (no drawing).
    buf = io.BytesIO()
    Image.new("RGB", (1, 1)).save(buf, format="PNG")
    monkeypatch.setattr(assemble, "png_bytes", lambda fig: buf.getvalue())
    path = render_report(_run(False), tmp_path)
    text = path.read_text(encoding="utf-8")
    assert "<b>cross</b>" not in text
    assert esc("<b>cross</b> & co") in text

    class Tags(HTMLParser):
        seen: list[str] = []

        def handle_starttag(self, tag, attrs):
            self.seen.append(tag)
    parser = Tags()
    parser.feed(text)
    assert "b" not in parser.seen        # the class name's <b> did not become a tag


def test_table_highlights_only_the_given_rows():
    """Highlighted rows carry the pick class; formatters are applied per cell."""
    frame = pd.DataFrame({"x": [0.5, 0.25], "p": [0.0004, np.nan]})
    html = table(frame, (Column("x", "x", pct), Column("p", "p", pvalue)),
                 highlight=[False, True])
    assert html.count('<tr class="pick">') == 1
    assert "50.0%" in html and "&lt;0.001" in html and "\u2013" in html


def test_page_has_numbered_sections_and_a_matching_contents():
    """Every contents link points at a section id, numbered in order."""
    from tinyconv.report.html import Section

    text = page("T", "k", {"a": "b"}, "", [Section("one", "One", ""), Section("two", "Two", "")],
                "f")
    assert '<a href="#one"><span>1</span>One</a>' in text and 'id="two"' in text
    assert '<span class="no">02</span>' in text


@pytest.mark.parametrize("value,shown", [(0.9234, "92.3%"), (None, "\u2013"),
                                         (float("nan"), "\u2013")])
def test_percent_format(value, shown):
    """Accuracies show as one-decimal percentages; missing values as a dash."""
    assert pct(value) == shown


def test_units_that_did_not_finish_are_listed_with_their_reason():
    """Diverged or failed units are counted and listed with their message."""
    data = _run(False)
    extra = pd.DataFrame([{"candidate": "8x8gray/d", "fold": 0, "rung": 0, "epochs": 2,
                           "status": "diverged", "held_acc": None, "train_acc": None,
                           "message": "loss not finite in epoch 2 of 2; try a smaller lr",
                           "history": "{}"}])
    units = pd.concat([data.units.assign(cpu_s=1.5), extra.assign(cpu_s=0.5)],
                      ignore_index=True)
    text = units_summary(RunData(**{**data.__dict__, "units": units}))
    assert "9 done, 1 diverged" in text and "14 CPU seconds" in text
    assert "Units that did not finish" in text and "try a smaller lr" in text
    assert units_summary(data).count("<tr>") == 0     # all done: no table


def test_a_pick_without_mistakes_gets_plain_notes(tmp_path, monkeypatch):
    """All held-out images right: no confusion rows, and the galleries say there are none."""
    import dataclasses

    import tinyconv.report.assemble as assemble
    from tinyconv.report.gallery import confusion_gallery

    monkeypatch.setattr(assemble, "png_bytes", lambda fig: b"")   # tables only here
    data = _run(False)
    p = data.predictions
    perfect = dataclasses.replace(p, pred=p.label.copy())
    parts = assemble.assemble(dataclasses.replace(data, predictions=perfect))
    assert parts.tables["confusions.csv"].empty and parts.tables["mistakes.csv"].empty
    assert parts.counts.trace() == parts.counts.sum()
    fig = confusion_gallery(data.images, [], CLASSES)
    assert any("no mistakes" in t.get_text() for ax in fig.axes for t in ax.texts)


def test_number_format_drops_the_sign_of_a_rounded_zero():
    """-0.0001 at three decimals shows as 0.000; real negatives keep their sign."""
    assert num(-0.0001, 3) == "0.000" and num(-0.018, 3) == "-0.018"
    assert num(1234567) == "1,234,567" and num(None) == "\u2013"


def test_pick_flags_warn_of_chance_level_and_over_fitting():
    """The pick gets a warning when near chance (2 SE) or over-fitting by more than 10 points."""
    import dataclasses

    data = _run(False)
    assert pick_flags(data) == []                       # 87% of 3 classes, gap 5 points
    r = data.ranking.copy()
    i = r.index[r["pick"]][0]
    r.loc[i, ["acc_mean", "acc_se", "gap"]] = [0.36, 0.02, 0.30]
    flags = pick_flags(dataclasses.replace(data, ranking=r))
    assert len(flags) == 2
    assert "within two standard errors of chance (33.3%)" in flags[0]
    assert "30 points above held-out" in flags[1]


def test_the_export_section_names_its_network_and_a_stale_device_measurement():
    """An export of another candidate says so; a device.json of an earlier export is flagged."""
    import dataclasses

    from tinyconv.report.shipping import device_section, export_section

    data = _run(pick_is_best=False)
    export = {"arch": NAMES["c"], "n_eval": 90, "agreement": 0.99, "float_accuracy": 0.9,
              "int8_accuracy": 0.89, "eval_set": "training (all)", "files": ["out/tc.c"]}
    device = {"arch": NAMES["b"], "instructions": 1000, "instructions_per_mac": 2.0,
              "macs": 500, "clock_mhz": 80, "ms_at_clock": 0.1, "flash_bytes": 100,
              "ram_bytes": 50, "bit_exact": True, "mismatched_images": 0, "core": "cortex-m4",
              "board": "mps2-an386", "images": 16, "cpi": 1.3, "estimate": {}}
    data = dataclasses.replace(data, export=export, device=device)
    body = export_section(data).body
    assert f"<code>{NAMES['c']}</code> (not the current pick)" in body
    assert "99.0% of 90 images (the same class chosen)" in body
    assert "float 90.0%, int8 89.0%" in body and "on images it trained on" in body
    assert f"This measurement is of {NAMES['b']}, from an earlier export" in \
        device_section(data).body
