"""Tests of search/rank.py: Student t, the corrected t-test, fronts, one-SE, the table."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import special, stats

from search import rank

WORKED = [.02, .01, .03, 0, .015, .025, .01, .02, .005, .015]


@pytest.mark.parametrize("df", [1, 2, 3, 4.5, 9, 30, 200])
def test_t_sf_matches_scipy(df):
    """Our Student-t upper tail agrees with scipy.stats.t.sf over a wide range of t."""
    # Reference: scipy.stats.t.sf (SciPy).
    for t in [-40, -7.5, -2, -0.3, 0, 0.01, 0.7, 1.96, 3.576, 5.196, 12, 60]:
        ours, ref = rank.t_sf(t, df), stats.t.sf(t, df)
        assert ours == pytest.approx(ref, rel=1e-10, abs=1e-300), (t, df)


def test_t_two_sided_tiny_tail_relative_precision():
    """Far tails keep relative precision (computed directly, not as 1 - something)."""
    # Reference: scipy.stats.t.sf (SciPy).
    for t, df in [(30.0, 9), (100.0, 4), (9.0, 60)]:
        assert rank.t_two_sided(t, df) == pytest.approx(2 * stats.t.sf(t, df), rel=1e-9)


def test_betainc_matches_scipy():
    """The regularised incomplete beta agrees with scipy.special.betainc."""
    # Reference: scipy.special.betainc (SciPy).
    rng = np.random.default_rng(0)
    for a, b, x in zip(rng.uniform(0.1, 40, 60), rng.uniform(0.1, 40, 60), rng.uniform(0, 1, 60)):
        assert rank.betainc(a, b, x) == pytest.approx(special.betainc(a, b, x),
                                                      rel=1e-9, abs=1e-15)


def test_uncorrected_equals_scipy_ttest_rel():
    """With the correction term removed the test is scipy's paired t-test."""
    # Reference: scipy.stats.ttest_rel (SciPy), two-sided.
    rng = np.random.default_rng(3)
    for k in (3, 5, 10):
        a, b = rng.uniform(0.6, 0.9, k), rng.uniform(0.6, 0.9, k)
        t, p = rank.corrected_ttest(a - b, 0.0)
        ref = stats.ttest_rel(a, b)
        assert t == pytest.approx(ref.statistic, rel=1e-12)
        assert p == pytest.approx(ref.pvalue, rel=1e-9)


def test_worked_example_by_hand():
    """The CHECKS.md worked example: naive t = 5.196, corrected t = 3.576 (k = 10)."""
    # Nadeau & Bengio (Machine Learning 2003): t = dbar / sqrt((1/J + n_test/n_train) s^2);
    # for 10-fold n_test/n_train = 1/9. Values computed by hand (CHECKS.md).
    t_naive, _ = rank.corrected_ttest(WORKED, 0.0)
    t_corr, p_corr = rank.corrected_ttest(WORKED, 1 / 9)
    assert round(t_naive, 3) == 5.196
    assert round(t_corr, 3) == 3.576
    # By hand: dbar = 0.015, s^2 = 0.0000833..., corrected variance factor 1/10 + 1/9.
    d = np.array(WORKED)
    s2 = ((d - d.mean()) ** 2).sum() / 9
    assert t_corr == pytest.approx(0.015 / math.sqrt((1 / 10 + 1 / 9) * s2), rel=1e-12)
    # The p-value is the two-sided Student t with J - 1 = 9 dof (SciPy reference).
    assert p_corr == pytest.approx(2 * stats.t.sf(3.576, 9), rel=1e-3)


def test_ttest_degenerate_cases():
    """Identical models give t = 0, p = 1; a constant non-zero gap gives p = 0."""
    assert rank.corrected_ttest([0, 0, 0], 0.5) == (0.0, 1.0)
    t, p = rank.corrected_ttest([0.1, 0.1, 0.1], 0.5)
    assert t == math.inf and p == 0.0
    with pytest.raises(ValueError, match="at least 2 paired differences"):
        rank.corrected_ttest([0.1], 0.5)


def test_pareto_toy():
    """Dominated points leave the front; equal points both stay."""
    acc = [0.9, 0.8, 0.85, 0.9, 0.7, 0.95]
    cost = [100, 50, 60, 100, 50, 1000]
    assert rank.pareto_mask(acc, cost).tolist() == [True, True, True, True, False, True]


def test_one_se_rule_toy():
    """The pick is the fewest parameters whose mean is within one SE of the best."""
    # One-SE rule: Hastie, Tibshirani & Friedman, ESL 2nd ed. §7.10.
    means = [0.90, 0.88, 0.876, 0.80]
    ses = [0.025, 0.01, 0.01, 0.01]
    params = [5000, 3000, 1000, 100]
    names = ["a", "b", "c", "d"]
    best, pick, within = rank.one_se_pick(means, ses, params, names)
    assert best == 0 and pick == 2
    assert within.tolist() == [True, True, True, False]
    # Exactly on the boundary counts as within (ties in floating point).
    best, pick, _ = rank.one_se_pick([0.9, 0.875], [0.025, 0.0], [10, 5], ["x", "y"])
    assert pick == 1


def _toy_units(accs: dict[str, list[float]], rung: dict[str, int] | None = None):
    rows = []
    for cand, values in accs.items():
        r = (rung or {}).get(cand, 1)
        for fold, v in enumerate(values):
            rows.append({"candidate": cand, "fold": fold, "rung": r, "epochs": 3 ** r,
                         "status": "done", "held_acc": v, "train_acc": min(1.0, v + 0.05)})
    return pd.DataFrame(rows)


def _toy_candidates(params: dict[str, int]):
    return pd.DataFrame([{"candidate": c, "params": p, "macs": 10 * p,
                          "peak_int8_bytes": 2048, "flash_bytes": p + 512}
                         for c, p in params.items()])


def test_table_statistics_and_ranks():
    """Means, SEs, per-kparam, p-values and both ranks of a small table."""
    accs = {"big": [0.9, 0.92, 0.88], "mid": [0.9, 0.9, 0.88], "tiny": [0.6, 0.5, 0.55],
            "early": [0.4, 0.45, 0.5]}
    units = _toy_units(accs, rung={"early": 0})
    table = rank.rank_units(units, _toy_candidates({"big": 8000, "mid": 2000, "tiny": 100,
                                                    "early": 50}), n_classes=4, folds=3)
    t = table.set_index("candidate")
    assert t.at["big", "acc_mean"] == pytest.approx(0.9)
    assert t.at["big", "acc_se"] == pytest.approx(np.std([0.9, 0.92, 0.88], ddof=1) / 3 ** .5)
    assert t.at["mid", "acc_per_kparam"] == pytest.approx((0.8933333333 - 0.25) / 2.0)
    assert t.at["big", "gap"] == pytest.approx(0.05)
    assert math.isnan(t.at["big", "p_vs_best"])
    # Corrected test of big vs tiny, k = 3 so n_test/n_train = 1/2 (Nadeau & Bengio 2003).
    d = np.array(accs["big"]) - np.array(accs["tiny"])
    assert t.at["tiny", "p_vs_best"] == pytest.approx(rank.corrected_ttest(d, 0.5)[1])
    # "early" stopped at a lower rung: listed last, not a finalist, never picked.
    assert table["candidate"].iloc[-1] == "early"
    assert not t.at["early", "finalist"] and not t.at["early", "pareto_params"]
    assert t.at["mid", "pick"] and t["pick"].sum() == 1
    assert t.at["big", "within_1se"] and t.at["mid", "within_1se"]
    assert not t.at["tiny", "within_1se"]
    # Ranks are positions by each score alone; rows come pick first (see the next test).
    assert t["rank_per_param"].to_dict() == {"tiny": 1, "mid": 2, "big": 3, "early": 4}
    assert t["rank_accuracy"].to_dict() == {"big": 1, "mid": 2, "tiny": 3, "early": 4}
    assert list(table.columns) == list(rank.COLUMNS)


@pytest.mark.parametrize("by,order", [
    ("per_param", ["mid", "small", "big", "tiny", "wide", "early"]),
    ("accuracy", ["mid", "big", "small", "wide", "tiny", "early"]),
])
def test_rows_lead_with_the_pick_then_the_one_se_set_then_the_rest(by, order):
    """Row 1 is the pick, then the one-SE set, the other finalists, the early stops; by score."""
    accs = {"big": [0.9, 0.92, 0.88], "mid": [0.9, 0.9, 0.88], "small": [0.89, 0.90, 0.88],
            "tiny": [0.6, 0.5, 0.55], "wide": [0.7, 0.72, 0.68], "early": [0.4, 0.45, 0.5]}
    params = {"big": 8000, "mid": 2000, "small": 2500, "tiny": 100, "wide": 9000, "early": 50}
    table = rank.rank_units(_toy_units(accs, rung={"early": 0}), _toy_candidates(params),
                            n_classes=4, folds=3, by=by)
    assert list(table["candidate"]) == order
    assert table["pick"].iloc[0]
    groups = dict(zip(table["candidate"], table["group"]))
    assert groups == {"mid": "pick", "big": "within_one_se", "small": "within_one_se",
                      "tiny": "outside_one_se", "wide": "outside_one_se",
                      "early": "stopped_early"}


def test_incomplete_rungs_do_not_count():
    """A rung missing a fold (or with a diverged fold) falls back to the last complete rung."""
    units = _toy_units({"a": [0.8, 0.7, 0.9]}, rung={"a": 0})
    upper = _toy_units({"a": [0.95, 0.96]}, rung={"a": 1})
    diverged = pd.DataFrame([{"candidate": "a", "fold": 2, "rung": 1, "epochs": 3,
                              "status": "diverged", "held_acc": np.nan, "train_acc": np.nan}])
    table = rank.rank_units(pd.concat([units, upper, diverged]),
                            _toy_candidates({"a": 10}), 2, 3)
    assert table["rung"].tolist() == [0]
    assert table["acc_mean"].iloc[0] == pytest.approx(0.8)


def test_bad_order_refused():
    """An unknown order is refused naming the choices."""
    with pytest.raises(ValueError, match="expected one of per_param, accuracy"):
        rank.rank_units(_toy_units({"a": [1, 1]}), _toy_candidates({"a": 1}), 2, 2, by="size")
