"""One search from start to ranking: data, space, budgets, store, workers, loop.

:func:`run_search` is what ``tinyconv search`` and ``tinyconv demo`` call:

1. read the space and check the run folder's store (both cheap), then load
   and fingerprint the data, finding every data problem in one pass (the
   folds included); apply budgets from the command line over the space file's,
   and training settings from the command line over the space file's
   ``[training]`` choices;
2. enumerate the architectures, cost them and drop those over budget (they
   are stored, marked, and never trained); pair each with every recipe
   (:mod:`search.recipes`): a candidate is an architecture plus a recipe;
   optionally subsample the candidates;
3. assign stratified folds (seeded); open the run store (refusing a folder
   that holds another run); write the data for the workers;
4. run the loop on local processes or a Dask cluster; rank; write
   ``ranking.csv``.

The run folder is locked for the whole search, before anything else
(:mod:`search.folder_lock`): a second search on it stops at once, naming the
process that holds it.
"""

from __future__ import annotations

import dataclasses
import os
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from search.config import (BASE_EPOCHS, DEFAULT_TRAINING, ETA, FOLDS, RANK_BY, RANK_ORDERS,
                           SEED, SIMPLEST_BY, TOP_EPOCHS, SearchSettings)
from search.folder_lock import FolderLock
from search.rank import SIMPLEST, rank_run, save_ranking
from search.ranking import Ranking
from search.recipes import RECIPE_KEYS, candidate_key, make_recipes
from search.runner import Outcome, Progress, SearchLoop
from search.schedule import derive_seed
from search.store import RunStore
from search.store_writer import check_folder
from search.unit import UnitData

#: The source recorded for the general space (``search/starter.py``), used without --space.
GENERAL_SPACE = "builtin:general"
#: Command-line budget names -> the space file's [budget] keys.
BUDGET_KEYS = {"max_params": "max_params", "max_macs": "max_macs",
               "max_ram_kb": "max_peak_kb", "max_flash_kb": "max_flash_kb",
               "max_ms": "max_ms", "core": "core", "clock_mhz": "clock_mhz"}


@dataclass(frozen=True)
class SearchRequest:
    """Everything a search is asked to do (the command line, as data).

    ``budgets`` maps ``max_params``, ``max_macs``, ``max_ram_kb`` (int8 peak
    activation memory) and ``max_flash_kb`` to limits that replace the space
    file's; ``training`` overrides :data:`DEFAULT_TRAINING`, and its recipe keys
    (augment, copies, lr, weight_decay, schedule) replace the space file's
    ``[training]`` choices by one each. ``simplest_by`` is the cost the
    one-standard-error pick minimises (``search.rank.SIMPLEST``). ``space=None``
    searches the general space sized for the data and budgets
    (:mod:`search.starter`). ``workers`` is the
    number of local processes (default: the number of cores; 0 runs the units
    in this process); ``cluster`` a Dask scheduler address (or a
    ``distributed`` cluster object), used instead of local processes.
    """

    data: str
    space: str | None
    out: Path
    folds: int = FOLDS
    seed: int = SEED
    eta: int = ETA
    top_epochs: int = TOP_EPOCHS
    base_epochs: int = BASE_EPOCHS
    full: bool = False
    max_candidates: int | None = None
    budgets: dict = field(default_factory=dict)
    budget_cpu_s: float | None = None
    budget_epochs: int | None = None
    training: dict = field(default_factory=dict)
    workers: int | None = None
    cluster: object | None = None
    rank_by: str = RANK_BY
    skip_bad: bool = False
    int8: bool = False
    simplest_by: str = SIMPLEST_BY


@dataclass
class SearchSummary:
    """What a search session left: where, how it ended, the ranking."""

    run_dir: Path
    outcome: Outcome
    table: pd.DataFrame
    ranking_path: Path
    n_candidates: int
    n_within: int
    n_searched: int
    removed: dict
    workers: str
    rank_by: str = RANK_BY
    space_source: str = ""
    space_description: str = ""
    simplest_by: str = SIMPLEST_BY

    @property
    def ranking(self) -> Ranking:
        """The ranking table as a value that knows its pick, best and finalists."""
        return Ranking(self.table)


def merged_budget(base, budgets: dict):
    """The ``base`` budget (a space file's; none when None) with the command line's
    ``budgets`` (``SearchRequest.budgets``) put over it."""
    from search.budget import Budget
    changes = {}
    for name, value in budgets.items():
        if name not in BUDGET_KEYS:
            raise ValueError(f"unknown budget {name!r}; expected {', '.join(BUDGET_KEYS)}")
        if value is not None:
            changes[BUDGET_KEYS[name]] = value
    return dataclasses.replace(base if base is not None else Budget(), **changes)


def run_search(request: SearchRequest, progress: Progress | None = None,
               work=None) -> SearchSummary:
    """Run (or resume) a search; see the module notes.

    Parameters
    ----------
    request : SearchRequest
    progress : Progress, optional
        Hooks for progress bars.
    work : callable, optional
        ``work(task, data) -> UnitResult`` in place of
        :func:`search.unit.run_unit` (a module-level function; for tests).

    Raises
    ------
    InputError
        Bad data, space, budgets or settings (``RunError`` for a folder that
        holds another run, ``BudgetError`` when nothing fits); a folder that
        another search holds (``FolderBusyError``) or that cannot be written
        (``WriteError``); a fault of the store (``StoreError``).
    """
    if request.rank_by not in RANK_ORDERS:
        raise ValueError(f"rank by {request.rank_by!r}: expected one of {RANK_ORDERS}")
    if request.simplest_by not in SIMPLEST:
        raise ValueError(f"simplest by {request.simplest_by!r}: expected one of "
                         f"{', '.join(SIMPLEST)}")
    # First the folder, so that a second search on it stops before any work.
    with FolderLock.take(request.out):
        # Local workers start (and warm up) while this process reads the data and
        # the space; they first touch the run folder with their first unit.
        local = _local_workers(request, work)
        try:
            return _search(request, progress, work, local)
        except BaseException:
            if local is not None:  # bad input or an interrupt: do not wait for the warm-up
                local.shutdown(cancel=True)
            raise


def _search(request: SearchRequest, progress: Progress | None, work, local) -> SearchSummary:
    from search.folds import assign_folds
    from search.space import (enumerate_space, filter_budget, load_space, space_from_text,
                              subsample)
    from search.starter import data_shape, starter_text
    from tinyconv.data import load_data

    # What needs no image first: the options, the space file, the run folder's store.
    _settings(request, None, None, {}, {}, ())
    base = {**DEFAULT_TRAINING, **request.training}
    _check_training(base)
    space = load_space(request.space) if request.space is not None else None
    check_folder(request.out)
    dataset = load_data(request.data, skip_bad=request.skip_bad, folds=request.folds)
    if space is None:  # the general space, sized for these data and budgets
        shape = data_shape(dataset, data_spec(request.data))
        text = starter_text(shape, merged_budget(None, request.budgets))
        space = space_from_text(text, GENERAL_SPACE)
    budget = merged_budget(space.budget, request.budgets)
    _check_simplest(request.simplest_by, budget)
    n_classes = dataset.n_classes
    archs = enumerate_space(space)
    filtered = filter_budget(archs, budget, n_classes)
    recipes = make_recipes(space.training, request.training, base)
    several = len(recipes) > 1
    survivors = [str(a) for a in filtered.survivors]
    _check_turns(filtered.survivors, recipes)
    keys = [candidate_key(a, r, several) for a in survivors for r in recipes]
    pool = keys
    if request.max_candidates is not None:
        pool = subsample(keys, request.max_candidates, derive_seed(request.seed, "subsample"))
    texts = list(pool)
    settings = _settings(request, space, dataset,
                         {k: getattr(budget, k) for k in BUDGET_KEYS.values()},
                         {k: v for k, v in base.items() if k not in RECIPE_KEYS}, recipes)
    for recipe in recipes:
        _check_training({**settings.training, **recipe.settings()})
    folds = assign_folds(dataset.labels, request.folds, derive_seed(request.seed, "folds"),
                         classes=dataset.classes)
    table = _with_recipes(filtered.table(), recipes, several)
    table["scheduled"] = table["candidate"].isin(set(texts))
    removed = {name: count * len(recipes) for name, count in filtered.over.items()}
    params = dict(zip(table["candidate"], table["params"]))
    costs = dict(zip(table["candidate"], table["macs"].astype(float)))
    store = RunStore.start(request.out, settings.as_dict(), table, removed)
    try:
        data = UnitData(dataset.images, dataset.labels, folds)
        data.save(request.out)
        executor = local if local is not None else _executor(request, data, work)
        try:
            loop = SearchLoop(store, executor, texts, params, store.settings(), progress, costs,
                              reopened=store.reopened)
            outcome = loop.run()
        except BaseException:
            executor.shutdown(cancel=True)  # nothing more can be stored: do not wait
            raise
        executor.shutdown()
        store.set_rank_order(request.rank_by)
        ranking = rank_run(store)
    finally:
        store.close()  # the folder holds no open file of this search after it
    path = save_ranking(ranking, request.out)
    return SearchSummary(Path(request.out), outcome, ranking, path, len(table), len(keys),
                         len(texts), removed, executor.description, request.rank_by,
                         str(space.source), space.description, request.simplest_by)


def _settings(request: SearchRequest, space, data, budget: dict, training: dict,
              recipes) -> SearchSettings:
    """The settings to store; with ``data=None`` a check of the options alone (before
    any image is read: :class:`SearchSettings` checks its values when made)."""
    from tinyconv.data import fingerprint
    return SearchSettings(
        data=data_spec(request.data), fingerprint=fingerprint(data) if data else "",
        classes=tuple(data.classes) if data else (),
        n_images=int(data.labels.size) if data else 0,
        space=getattr(space, "text", ""), space_source=str(getattr(space, "source", "")),
        folds=request.folds, seed=request.seed, eta=request.eta, top_epochs=request.top_epochs,
        base_epochs=request.base_epochs, full=request.full, max_candidates=request.max_candidates,
        budget=budget, budget_cpu_s=request.budget_cpu_s, budget_epochs=request.budget_epochs,
        training=training, skip_bad=request.skip_bad, int8=request.int8,
        recipes=tuple(str(r) for r in recipes), simplest_by=request.simplest_by)


def _check_training(training: dict) -> None:
    """Fail early (before any worker starts) on unusable training settings."""
    from tinyconv.train_config import TrainConfig
    TrainConfig(epochs=1, **training)


def _check_turns(archs, recipes) -> None:
    """Refuse quarter turns when an architecture within budget reads oblong images."""
    from tinyconv.augment import parse_augment
    for recipe in recipes:
        for arch in archs:
            parse_augment(recipe.augment).check_shape(arch.input.h, arch.input.w)


def _check_simplest(simplest_by: str, budget) -> None:
    """``ms`` needs the device time, which a run has when it names a core."""
    if simplest_by == "ms" and budget.core is None:
        from tinyconv.errors import InputError
        raise InputError("--simplest-by ms picks by the time per image on the device, and this "
                         "run names no core; give --core CORE (or a [device] table with core "
                         "in the space), or pick by params, macs, ram or flash")


def _with_recipes(table: pd.DataFrame, recipes, several: bool) -> pd.DataFrame:
    """The candidates table with one row per architecture and recipe (architecture
    first), keyed by :func:`search.recipes.candidate_key`."""
    if not several:
        return table
    rows = table.loc[table.index.repeat(len(recipes))].reset_index(drop=True)
    rows["candidate"] = [candidate_key(a, r, True)
                         for a in table["candidate"] for r in recipes]
    return rows


def _local_workers(request: SearchRequest, work):
    """Started local workers when the request runs on them, else None."""
    from search.executors import LocalWorkers
    count = request.workers if request.workers is not None else (os.cpu_count() or 1)
    if request.cluster is not None or count == 0:
        return None
    if count > 1 and work is None:
        from tinyconv.kernel_stamp import cold
        if cold():  # compile once here rather than in every worker at the same time
            from search.unit import prime_kernels
            prime_kernels()
    workers = LocalWorkers(request.out, count, work)
    workers.start()
    return workers


def _executor(request: SearchRequest, data: UnitData, work):
    """The cluster or in-process executor (local workers come from _local_workers)."""
    from search.executors import ClusterWorkers, InlineWorkers
    if request.cluster is not None:
        return ClusterWorkers(request.cluster, data, work)
    return InlineWorkers(data, work)


def data_spec(data: str) -> str:
    """The data spec as stored: a path made absolute, so that the report and the
    export can read it again from any working folder; built-in specs as given."""
    text = str(data)
    if text.startswith("builtin:"):
        return text
    return str(Path(text).expanduser().resolve())
