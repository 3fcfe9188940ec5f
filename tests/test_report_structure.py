"""The report's structure comparison: labels, size classes, winners and their spread.

The expected winners of the small rankings below are worked out by hand.
"""

from __future__ import annotations

import math

import pandas as pd
import pytest

from tinyconv.report.structure import (size_class, structure_of, structure_section,
                                       structure_sentences, structure_table)


@pytest.mark.parametrize("text, want", [
    ("16x16rgb/c8k3-p2-gap", "chain"),
    ("16x16rgb/c8k3-[c24k1-dw3-c8k1]-p2-gap", "inverted bottleneck"),
    ("16x16rgb/c8k3-[c24k1-bn-dw3-bn-c8k1-bn]-p2-gap", "inverted bottleneck"),
    ("16x16rgb/c8k3-[c8k3-c8k3]-p2-gap", "residual pair"),
    ("16x16rgb/c8k3-[c8k3-c8k3]-[c24k1-dw3-c8k1]", "mixed blocks"),
])
def test_structure_labels(text, want):
    """Chains, inverted bottlenecks (1x1 up, depthwise, 1x1 down) and pairs are told apart."""
    assert structure_of(text) == want


def test_size_classes():
    """Parameters fall in classes with edges at 1k, 4k, 16k and 64k."""
    assert [size_class(n) for n in (999, 1000, 3999, 15_000, 64_000)] == [
        "under 1k params", "1k-4k params", "1k-4k params", "4k-16k params",
        "64k params or more"]


def _ranking(rows) -> pd.DataFrame:
    cols = ["candidate", "params", "epochs", "folds", "acc_mean", "acc_se", "acc_min",
            "acc_max"]
    return pd.DataFrame(rows, columns=cols)


RANKING = _ranking([
    ("16x16rgb/c8k3-p2-gap", 400, 27, 3, 0.60, 0.02, 0.57, 0.63),
    ("16x16rgb/c8k3-[c24k1-dw3-c8k1]-p2-gap", 900, 27, 3, 0.70, 0.03, 0.66, 0.74),
    ("16x16rgb+hsv/c8k3-p2-gap", 560, 9, 3, 0.80, 0.01, 0.79, 0.81),
    ("16x16rgb/c16k3-p2-c32k3-p2-gap", 5_500, 27, 3, 0.81, 0.02, 0.78, 0.83),
    ("16x16rgb/c16k3-[c16k3-c16k3]-p2-c32k3-p2-gap", 10_200, 27, 3, 0.80, 0.02, 0.77, 0.82),
])


def test_winners_per_size_class_compare_only_the_longest_trained():
    """Under 1k: the bottleneck beats the chain by 10 points (5 SE of the chain); the
    rgb+hsv chain stopped at 9 epochs and is not compared. 4k-16k: the chain wins by
    half a standard error."""
    table = structure_table(RANKING)
    small = table[table["size"] == "under 1k params"].set_index(["structure", "colour"])
    assert bool(small.loc[("inverted bottleneck", "rgb"), "won"])
    assert small.loc[("inverted bottleneck", "rgb"), "lead_se"] == pytest.approx(5.0)
    assert not small.loc[("chain", "rgb+hsv"), "compared"]
    assert not small.loc[("chain", "rgb+hsv"), "won"]
    mid = table[table["size"] == "4k-16k params"].set_index("structure")
    assert bool(mid.loc["chain", "won"]) and mid.loc["chain", "lead_se"] == pytest.approx(0.5)
    assert math.isnan(mid.loc["residual pair", "lead_se"])
    said = structure_sentences(table)
    assert said[0].startswith("under 1k params: inverted bottleneck (rgb) won with "
                              "16x16rgb/c8k3-[c24k1-dw3-c8k1]-p2-gap at 70.0% \u00b1 3.0%, "
                              "folds 66.0% to 74.0%")
    assert said[1].endswith("(within one standard error: the order may be noise).")


def test_section_only_when_structures_differ():
    """One structure and colour: no section; two: a section with a row per structure."""
    assert structure_section(RANKING.iloc[[0, 3]]) is None
    section = structure_section(RANKING)
    assert section is not None and "inverted bottleneck" in section.body
    assert "stopped earlier: not compared" in section.body


def test_unreadable_candidates_are_left_out():
    """A candidate text that does not parse takes no part; none readable: no section."""
    damaged = RANKING.copy()
    damaged.loc[0, "candidate"] = "8x8gray/a"
    table = structure_table(damaged)
    assert "8x8gray/a" not in set(table["candidate"]) and len(table) == 4  # of 5 rows
    assert structure_section(damaged.assign(candidate="8x8gray/a")) is None
