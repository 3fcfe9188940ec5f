"""Ranking the candidates of a run from their per-fold held-out accuracies.

One row per candidate, at its highest rung whose units finished on every
fold. The statistics (all over the ``k`` folds of that rung):

* ``acc_mean`` and its standard error ``acc_se = sd(ddof=1) / sqrt(k)``;
  ``train_acc_mean`` and the over-fitting ``gap = train_acc_mean - acc_mean``;
* ``acc_per_kparam = (acc_mean - 1/K) / (params / 1000)``: accuracy gained
  over chance (``K`` classes) per thousand parameters, so a network at chance
  scores zero;
* ``t_vs_best`` / ``p_vs_best``: the corrected resampled t-test of the best
  candidate against this one, paired by fold (Nadeau & Bengio, "Inference for
  the generalization error", Machine Learning 52, 2003):
  ``t = dbar / sqrt((1/J + n_test/n_train) s^2)`` with ``J - 1`` degrees of
  freedom, two-sided; for k-fold ``n_test/n_train = 1/(k-1)``;
* ``pareto_params`` / ``pareto_macs``: not dominated in (higher accuracy,
  fewer parameters) or (higher accuracy, fewer MACs);
* ``within_1se``: mean within one standard error of the best;
  ``pick``: the simplest among those (the one-standard-error rule, Breiman et
  al., CART, 1984; Hastie, Tibshirani & Friedman, ESL §7.10), where simplest
  means the least of one cost, ``simplest_by``: ``params`` (the default),
  ``macs``, ``ram`` (int8 peak activation memory), ``flash`` (int8
  deployment) or ``ms`` (the device model's time per image; only for a run
  that names a core). Ties go to fewer parameters, then the higher mean;
* ``arch`` and ``recipe``: the candidate's architecture text and training
  recipe (:mod:`search.recipes`); the ``candidate`` key joins them when the
  run has several recipes and is the architecture alone otherwise;
* ``int8_acc_mean`` / ``int8_drop``: with ``search --int8``, the mean held-out
  accuracy of the int8 quantised networks of the last rung and what
  quantisation cost (``acc_mean - int8_acc_mean``); NaN otherwise.

The *finalists* are the rows at the highest rung in the table (with
``--full``, every row). A candidate dropped at an earlier rung was measured
after fewer epochs, so it is listed (with its epochs) but takes no part in
the best, the fronts, the one-SE set or the pick.

The rows come in four groups (column ``group``, :data:`GROUPS`), so that the
first row is always the answer: the pick; the other finalists within one
standard error of the best; the remaining finalists; the candidates stopped
at a lower rung. Within a group, rows are ordered by ``acc_per_kparam``
(``by="per_param"``) or by ``acc_mean`` (``by="accuracy"``). The two ranks
(``rank_per_param``, ``rank_accuracy``) are positions by each score alone,
finalists before the others. Ties go to fewer parameters, then the text, so
the table is the same whatever order the units finished in.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd

ORDERS = ("per_param", "accuracy")
#: --simplest-by names -> the ranking column the one-SE pick minimises.
SIMPLEST = {"params": "params", "macs": "macs", "ram": "peak_kb", "flash": "flash_kb",
            "ms": "ms"}
#: How the page and the summary say what the pick minimised.
SIMPLEST_WORDS = {"params": "the fewest parameters",
                  "macs": "the fewest multiply-accumulates per image",
                  "ram": "the least peak activation memory (int8)",
                  "flash": "the least flash (int8)",
                  "ms": "the shortest time per image on the device (cost model)"}
#: The row groups of the ranking, in the order the rows come (see the module notes).
GROUPS = ("pick", "within_one_se", "outside_one_se", "stopped_early")
COLUMNS = ("candidate", "group", "arch", "recipe", "params", "macs", "peak_kb", "flash_kb", "ms",
           "rung", "epochs", "folds",
           "acc_mean", "acc_se", "acc_min", "acc_max", "train_acc_mean", "gap",
           "acc_per_kparam", "t_vs_best", "p_vs_best", "finalist", "pareto_params",
           "pareto_macs", "within_1se", "pick", "rank_per_param", "rank_accuracy",
           "int8_acc_mean", "int8_drop")
# Means of k accuracies that should tie can differ in the last bit.
_TOL = 1e-12


# ---------------------------------------------------------------- Student t


def _beta_fraction(a: float, b: float, x: float) -> float:
    """Continued fraction of the incomplete beta function (modified Lentz).

    The even and odd terms are ``d_2m = m(b-m)x / ((a+2m-1)(a+2m))`` and
    ``d_2m+1 = -(a+m)(a+b+m)x / ((a+2m)(a+2m+1))`` (Abramowitz & Stegun 26.5.8).
    """
    tiny = 1e-300
    c, d = 1.0, 1.0 - (a + b) * x / (a + 1.0)
    d = 1.0 / (d if abs(d) > tiny else tiny)
    h = d
    for m in range(1, 10_000):
        for num in (m * (b - m) * x / ((a + 2 * m - 1) * (a + 2 * m)),
                    -(a + m) * (a + b + m) * x / ((a + 2 * m) * (a + 2 * m + 1))):
            d = 1.0 + num * d
            d = 1.0 / (d if abs(d) > tiny else tiny)
            c = 1.0 + num / c
            c = c if abs(c) > tiny else tiny
            h *= d * c
        if abs(d * c - 1.0) < 1e-15:
            return h
    raise ArithmeticError(f"incomplete beta fraction did not converge (a={a}, b={b}, x={x})")


def betainc(a: float, b: float, x: float) -> float:
    """The regularised incomplete beta function ``I_x(a, b)`` for a, b > 0.

    Uses the continued fraction where it converges fast
    (``x < (a+1)/(a+b+2)``) and the symmetry ``I_x(a,b) = 1 - I_{1-x}(b,a)``
    elsewhere, so a small result is computed directly, not as a difference.
    """
    if not (a > 0 and b > 0):
        raise ValueError(f"betainc needs a, b > 0, got a={a}, b={b}")
    if x <= 0.0:
        return 0.0
    if x >= 1.0:
        return 1.0
    log_front = (math.lgamma(a + b) - math.lgamma(a) - math.lgamma(b)
                 + a * math.log(x) + b * math.log1p(-x))
    if x < (a + 1.0) / (a + b + 2.0):
        return math.exp(log_front) * _beta_fraction(a, b, x) / a
    return 1.0 - math.exp(log_front) * _beta_fraction(b, a, 1.0 - x) / b


def t_sf(t: float, df: float) -> float:
    """Upper tail ``P(T > t)`` of Student's t with ``df`` degrees of freedom.

    ``P(|T| > |t|) = I_{df/(df+t^2)}(df/2, 1/2)``, half of it on each side.
    """
    if not df > 0:
        raise ValueError(f"degrees of freedom must be positive, got {df}")
    if math.isnan(t):
        return math.nan
    if math.isinf(t):
        return 0.0 if t > 0 else 1.0
    tail = 0.5 * betainc(0.5 * df, 0.5, df / (df + t * t))
    return tail if t >= 0 else 1.0 - tail


def t_two_sided(t: float, df: float) -> float:
    """Two-sided p-value ``P(|T| >= |t|)``."""
    if math.isnan(t):
        return math.nan
    if math.isinf(t):
        return 0.0
    return betainc(0.5 * df, 0.5, df / (df + t * t))


def corrected_ttest(diffs: Sequence[float], test_train_ratio: float) -> tuple[float, float]:
    """Corrected resampled paired t-test (Nadeau & Bengio 2003).

    Parameters
    ----------
    diffs : sequence of float, length J >= 2
        Per-fold differences of a score between two models.
    test_train_ratio : float
        ``n_test / n_train``; ``1/(k-1)`` for k-fold, ``0`` for the plain
        (uncorrected) paired t-test.

    Returns
    -------
    (t, p) : the statistic and its two-sided p-value with ``J - 1`` dof.
        All differences equal: ``t = 0, p = 1`` if they are zero, else
        ``t = +-inf, p = 0``.
    """
    d = np.asarray(diffs, dtype=np.float64)
    if d.ndim != 1 or d.size < 2:
        raise ValueError(f"need at least 2 paired differences, got {d.size}")
    if test_train_ratio < 0:
        raise ValueError(f"test_train_ratio must be >= 0, got {test_train_ratio}")
    j = d.size
    mean = float(d.mean())
    var = float(d.var(ddof=1))
    scale = math.sqrt((1.0 / j + test_train_ratio) * var)
    if scale == 0.0 or scale < 1e-15 * max(abs(mean), 1e-300):
        if mean == 0.0:
            return 0.0, 1.0
        return math.copysign(math.inf, mean), 0.0
    t = mean / scale
    return t, t_two_sided(t, j - 1)


# ---------------------------------------------------------------- fronts and picks


def pareto_mask(acc: Sequence[float], cost: Sequence[float]) -> np.ndarray:
    """True where no other point has accuracy >= and cost <=, one strictly.

    Equal points do not dominate each other (both stay on the front).
    """
    a = np.asarray(acc, dtype=np.float64)
    c = np.asarray(cost, dtype=np.float64)
    ge = a[None, :] >= a[:, None]          # [i, j]: j at least as accurate as i
    le = c[None, :] <= c[:, None]
    strict = (a[None, :] > a[:, None]) | (c[None, :] < c[:, None])
    return ~np.any(ge & le & strict, axis=1)


def one_se_pick(acc_mean: Sequence[float], acc_se: Sequence[float],
                params: Sequence[int], names: Sequence[str],
                cost: Sequence[float] | None = None) -> tuple[int, int, np.ndarray]:
    """The one-standard-error rule.

    Parameters
    ----------
    acc_mean, acc_se, params, names : sequences of one length
    cost : sequence of float, optional
        What "simplest" minimises (default: the parameters).

    Returns
    -------
    (best, pick, within) : index of the best mean (ties: fewer parameters,
        then name), index of the pick (least ``cost`` within one SE of the
        best; ties: fewer parameters, higher mean, then name) and the boolean
        mask of the set.
    """
    m = np.asarray(acc_mean, dtype=np.float64)
    s = np.asarray(acc_se, dtype=np.float64)
    c = np.asarray(params if cost is None else cost, dtype=np.float64)
    order = sorted(range(len(m)), key=lambda i: (-m[i], params[i], names[i]))
    best = order[0]
    within = m >= m[best] - s[best] - _TOL
    pick = min(np.flatnonzero(within), key=lambda i: (c[i], params[i], -m[i], names[i]))
    return best, int(pick), within


# ---------------------------------------------------------------- the table


def rank_units(units: pd.DataFrame, candidates: pd.DataFrame, n_classes: int, folds: int,
               by: str = "per_param", device: dict | None = None,
               simplest_by: str = "params") -> pd.DataFrame:
    """The ranking table from a store's units and candidates (see the module notes).

    Parameters
    ----------
    units : DataFrame with candidate, fold, rung, epochs, status, held_acc, train_acc
    candidates : DataFrame with candidate, params, macs, peak_int8_bytes, flash_bytes
        (and ``arch``, ``recipe``; without them the candidate is its own
        architecture and the recipe is "")
    n_classes : int, the ``K`` of chance accuracy ``1/K``
    folds : int, the ``k`` of the cross-validation (a rung counts when all k finished)
    by : ``"per_param"`` or ``"accuracy"``, the order of the rows
    device : dict, optional
        ``{"core": ..., "clock_mhz": ...}``: the ``ms`` column is the device model's
        milliseconds per image there (NaN without a core)
    simplest_by : str
        The cost the one-SE pick minimises (a key of :data:`SIMPLEST`).

    Raises
    ------
    InputError
        For ``simplest_by="ms"`` without a device core.
    """
    if by not in ORDERS:
        raise ValueError(f"rank by {by!r}: expected one of {', '.join(ORDERS)}")
    if simplest_by not in SIMPLEST:
        raise ValueError(f"simplest by {simplest_by!r}: expected one of {', '.join(SIMPLEST)}")
    if simplest_by == "ms" and not (device or {}).get("core"):
        from tinyconv.errors import InputError
        raise InputError("simplest by 'ms' needs the time per image on a device, and this run "
                         "names no core; search again with --core CORE, or pick by params, "
                         "macs, ram or flash")
    done = units[units["status"] == "done"]
    counts = done.groupby(["candidate", "rung"])["fold"].nunique()
    complete = counts[counts >= folds].reset_index()
    if complete.empty:
        return pd.DataFrame({c: [] for c in COLUMNS})
    top = complete.groupby("candidate")["rung"].max()
    cost = candidates.set_index("candidate")
    rows, fold_acc = [], {}
    for cand, rung in sorted(top.items()):
        sel = done[(done["candidate"] == cand) & (done["rung"] == rung)].sort_values("fold")
        acc = sel["held_acc"].to_numpy(np.float64)
        fold_acc[cand] = acc
        params = int(cost.at[cand, "params"])
        mean = float(acc.mean())
        train = float(sel["train_acc"].to_numpy(np.float64).mean())
        # int8 figures (search --int8, last rung only): NaN unless every fold has one
        int8 = (sel["int8_acc"].to_numpy(np.float64) if "int8_acc" in sel
                else np.full(acc.size, np.nan))
        int8_mean = float(int8.mean()) if np.all(np.isfinite(int8)) else math.nan
        arch = str(cost.at[cand, "arch"]) if "arch" in cost.columns else cand
        rows.append({
            "candidate": cand, "arch": arch,
            "recipe": str(cost.at[cand, "recipe"]) if "recipe" in cost.columns else "",
            "params": params, "macs": int(cost.at[cand, "macs"]),
            "peak_kb": cost.at[cand, "peak_int8_bytes"] / 1024.0,
            "flash_kb": cost.at[cand, "flash_bytes"] / 1024.0,
            "ms": _ms(arch, n_classes, device),
            "rung": int(rung), "epochs": int(sel["epochs"].iloc[0]), "folds": int(acc.size),
            "acc_mean": mean, "acc_se": float(acc.std(ddof=1) / math.sqrt(acc.size)),
            "acc_min": float(acc.min()), "acc_max": float(acc.max()),
            "train_acc_mean": train, "gap": train - mean,
            "acc_per_kparam": (mean - 1.0 / n_classes) / (params / 1000.0),
            "int8_acc_mean": int8_mean, "int8_drop": mean - int8_mean,
        })
    table = pd.DataFrame(rows)
    final = table["rung"] == table["rung"].max()
    table["finalist"] = final
    fin = table[final]
    best, pick, within = one_se_pick(fin["acc_mean"].to_numpy(), fin["acc_se"].to_numpy(),
                                     fin["params"].tolist(), fin["candidate"].tolist(),
                                     fin[SIMPLEST[simplest_by]].tolist())
    best_name = fin["candidate"].iloc[best]
    ratio = 1.0 / (folds - 1)
    t_col, p_col = [], []
    for cand in table["candidate"]:
        if cand == best_name:
            t_col.append(math.nan)
            p_col.append(math.nan)
            continue
        t, p = corrected_ttest(fold_acc[best_name] - fold_acc[cand], ratio)
        t_col.append(t)
        p_col.append(p)
    table["t_vs_best"] = t_col
    table["p_vs_best"] = p_col
    for col, cost_col in (("pareto_params", "params"), ("pareto_macs", "macs")):
        mask = np.zeros(len(table), dtype=bool)
        mask[np.flatnonzero(final)] = pareto_mask(fin["acc_mean"], fin[cost_col])
        table[col] = mask
    table["within_1se"] = False
    table.loc[fin.index[within], "within_1se"] = True
    table["pick"] = False
    table.loc[fin.index[pick], "pick"] = True
    table["rank_per_param"] = _ranks(table, "acc_per_kparam")
    table["rank_accuracy"] = _ranks(table, "acc_mean")
    table["group"] = [GROUPS[0] if p else GROUPS[1] if w else GROUPS[2] if f else GROUPS[3]
                      for p, w, f in zip(table["pick"], table["within_1se"], table["finalist"])]
    key = "rank_per_param" if by == "per_param" else "rank_accuracy"
    table["_group"] = table["group"].map(GROUPS.index)
    table = table.sort_values(["_group", key]).reset_index(drop=True)
    return table[list(COLUMNS)]


def _ms(candidate: str, n_classes: int, device: dict | None) -> float:
    """The device model's milliseconds per image, or NaN without a core."""
    if not device or not device.get("core"):
        return math.nan
    from tinyconv.device.model import time_ms
    return time_ms(candidate, n_classes, device["core"], device.get("clock_mhz"))


def _ranks(table: pd.DataFrame, score: str) -> np.ndarray:
    """1-based positions: finalists first, then by score, params, text."""
    order = sorted(range(len(table)), key=lambda i: (
        -table["rung"].iat[i], -table[score].iat[i], -table["acc_mean"].iat[i],
        table["params"].iat[i], table["candidate"].iat[i]))
    ranks = np.empty(len(table), dtype=np.int64)
    ranks[order] = np.arange(1, len(table) + 1)
    return ranks


def rank_run(store, by: str | None = None) -> pd.DataFrame:
    """The ranking table of a run store (``search.store.RunStore``).

    ``by=None`` takes the order the search was asked for (``--rank-by``),
    ``per_param`` when none was recorded; the pick minimises the run's
    ``simplest_by`` (parameters when none was recorded).
    """
    from search.config import RANK_BY, SIMPLEST_BY
    from search.recipes import recipe_of, split_key

    settings = store.settings()
    by = by or store.rank_order() or RANK_BY
    budget = settings.budget or {}
    device = {"core": budget.get("core"), "clock_mhz": budget.get("clock_mhz")}
    candidates = store.candidates()
    candidates["arch"] = [split_key(c)[0] for c in candidates["candidate"]]
    candidates["recipe"] = [recipe_of(settings, c) for c in candidates["candidate"]]
    return rank_units(store.units(), candidates, settings.n_classes, settings.folds,
                      by=by, device=device, simplest_by=settings.simplest_by or SIMPLEST_BY)


def save_ranking(table: pd.DataFrame, run_dir: str | Path) -> Path:
    """Write the table as ``ranking.csv`` in the run folder; returns its path.

    The file is written whole (:func:`tinyconv.files.write_whole`), and not
    at all when it already holds the same table.

    Raises
    ------
    tinyconv.errors.WriteError
        When the file cannot be written (full disk, read-only folder).
    """
    from tinyconv.files import write_bytes_whole

    path = Path(run_dir) / "ranking.csv"
    text = table.to_csv(index=False).encode("utf-8")
    if not (path.is_file() and path.read_bytes() == text):
        write_bytes_whole(path, text, then="run the same search command again: the units "
                                           "are kept in run.sqlite")
    return path
