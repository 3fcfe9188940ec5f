"""The search loop: brackets, rungs, units, budgets, crashes, resume.

Rungs run synchronously: every unit of a rung (each candidate on each of the
``k`` folds) finishes before the promotion to the next rung is decided, from
the stored results alone. Units are submitted in one fixed order and a unit
already in the store is never submitted again, so a run's results do not
depend on the number of workers, on the order units finish in, or on
interruptions (re-running replays the same decisions from the store).

Budgets: before each submission the loop checks the epoch budget (planned
epochs of finished and in-flight units plus the new one; deterministic) and
the CPU budget (CPU seconds of the finished units, plus the forecast of the
units in flight and the new one, :mod:`search.cpu_forecast`; stops when that
would pass it, or when the finished units alone reach it). Once a budget
stops the loop, units in flight finish and are kept,
nothing new starts, and the outcome says which budget ended the run.

Only a unit's own failure is final (:mod:`search.failures`): a unit that comes
back without a result (its worker died, it was cancelled, its worker ran out
of memory) runs again, up to ``ATTEMPTS`` times in the session, and is never
stored as failed. A worker crash breaks a local pool and every unit in flight
with it: the loop starts a fresh pool and runs each of those units alone, so
that a unit that kills its worker every time is told apart from the others.
A unit still without a result after its attempts ends the session once the
rest of its rung is stored (``WorkersLostError``): promoting without it
would change the plan, and the next session runs it again. An executor that
can run nothing more (a Dask scheduler that went away) ends the session at
once, with the same error; what finished is stored either way.
"""

from __future__ import annotations

from concurrent.futures import FIRST_COMPLETED, Future, wait
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from search import schedule
from search.config import SearchSettings
from search.cpu_forecast import CpuForecast
from search.executor import Executor
from search.failures import ATTEMPTS, describe
from search.recipes import arch_of, training_for
from search.store import RunStore
from search.unit import UnitResult, UnitTask
from tinyconv.errors import StoreError, WorkersLostError


class Progress:
    """Hooks the loop calls; the default does nothing (see tinyconv/workflows/progress.py)."""

    def start(self, plan_units: int, plan_epochs: int, done_units: int, cpu_s: float,
              epochs: int) -> None:
        """Before the first unit: the units and epochs of the full plan (upper bounds,
        :func:`plan_size`), the units already stored and the CPU and epochs they spent."""

    def rung(self, bracket: int, n_brackets: int, level: int, n_levels: int,
             candidates: int, folds: int, epochs: int, done: int) -> None:
        """A rung starts: its ``level`` in the ladder of ``n_levels`` (0-based, as
        stored); ``done`` of its units are already stored."""

    def unit(self, result: UnitResult, cpu_s: float, epochs: int) -> None:
        """A unit finished; the totals spent so far."""

    def close(self) -> None:
        """The loop ended."""


@dataclass
class Outcome:
    """How a search session ended.

    ``retried`` counts the runs of units again after an outside failure (in
    this session, and those stored as failed by an earlier version and now
    run again). ``state`` is ``complete`` (the whole plan ran), ``budget_cpu`` or
    ``budget_epochs`` (a budget ended it), ``interrupted``, or ``stopped``
    (an error ended it: a store or worker fault, said by the error).
    """

    state: str = "complete"
    units_run: int = 0
    units_stored: int = 0
    failed: int = 0
    diverged: int = 0
    retried: int = 0
    cpu_s: float = 0.0
    epochs: int = 0
    notes: list[str] = field(default_factory=list)

    def as_dict(self) -> dict:
        return {"state": self.state, "units_run": self.units_run,
                "units_stored": self.units_stored, "failed": self.failed,
                "diverged": self.diverged, "retried": self.retried, "cpu_s": self.cpu_s,
                "epochs": self.epochs,
                "notes": list(self.notes)}


class _BudgetStop(Exception):
    def __init__(self, state: str):
        self.state = state


def plan_brackets(candidates: Sequence[str], top_epochs: int, eta: int, full: bool,
                  seed: int, base_epochs: int = 1
                  ) -> list[tuple[schedule.Bracket, tuple[str, ...]]]:
    """The brackets and the candidates each starts with."""
    if full:
        (bracket,) = schedule.full_plan(top_epochs, len(candidates), eta, base_epochs)
        return [(bracket, tuple(sorted(candidates)))]
    return schedule.assign(candidates, schedule.hyperband(top_epochs, eta, base_epochs), seed)


def plan_size(plan, folds: int) -> int:
    """Units of the plan if every rung runs in full (an upper bound: brackets that
    meet a candidate at the same epochs share its units)."""
    return folds * sum(rung.size for bracket, _ in plan for rung in bracket.rungs)


def plan_epochs(plan, folds: int) -> int:
    """Training epochs of the plan if every rung runs in full (an upper bound, as
    :func:`plan_size`)."""
    return folds * sum(bracket.epoch_cost() for bracket, _ in plan)


class SearchLoop:
    """One session of a search over ``candidates`` (texts within budget).

    Parameters
    ----------
    store : RunStore
    executor : Executor
        Where units run (:class:`search.executor.Executor`: local processes, this
        process or a Dask cluster).
    candidates : sequence of str
    params : mapping of candidate text to parameter count (promotion ties)
    settings : SearchSettings
        The run's settings as stored (``RunStore.settings()``): folds, seed,
        eta, top_epochs, base_epochs, full, the budgets, training, classes.
    progress : Progress, optional
    costs : mapping of candidate text to a cost estimate (MACs per image), optional
        Within a rung, units start in decreasing cost, so that the last ones
        to finish are short and no worker idles long at the end of a rung
        (longest-first scheduling). Results do not depend on the order: each
        unit's seed comes from the run seed and the unit itself.
    reopened : int
        Units the store reopened (outside failures stored by an earlier
        version), counted as retried.
    """

    def __init__(self, store: RunStore, executor: Executor, candidates: Sequence[str],
                 params: Mapping[str, int], settings: SearchSettings,
                 progress: Progress | None = None,
                 costs: Mapping[str, float] | None = None, reopened: int = 0):
        self.store, self.executor = store, executor
        self.candidates = list(candidates)
        self.params = dict(params)
        self.costs = dict(costs or {})
        self.forecast = CpuForecast(self.costs)
        self.s = settings
        self.k = settings.folds
        self.progress = progress or Progress()
        self._training: dict[str, tuple] = {}
        self.n_classes = settings.n_classes
        self.finished = store.finished()
        self.cpu_s, self.epochs = store.spent()
        for cand, epochs, cpu_s in store.done_cpu():  # a resume forecasts from the store
            self.forecast.add(cand, epochs, cpu_s)
        self.outcome = Outcome(retried=reopened)
        self._inflight: dict[Future, UnitTask] = {}
        self._inflight_epochs = 0
        self._tries: dict[tuple[str, int, int], int] = {}   # runs lost to outside failures
        self._lost: dict[tuple[str, int, int], tuple[UnitTask, str]] = {}

    # ------------------------------------------------------------ the plan

    def run(self) -> Outcome:
        plan = plan_brackets(self.candidates, self.s.top_epochs, self.s.eta, self.s.full,
                             self.s.seed, self.s.base_epochs)
        self.n_levels = 1 + max((r.level for bracket, _ in plan for r in bracket.rungs), default=0)
        self.progress.start(plan_size(plan, self.k), plan_epochs(plan, self.k),
                            len(self.finished), self.cpu_s, self.epochs)
        ended = False  # the plan ran, or a budget ended it (not an error)
        try:
            for b, (bracket, chosen) in enumerate(plan):
                current = chosen[:bracket.rungs[0].size]
                for i, rung in enumerate(bracket.rungs):
                    self._run_rung(current, rung, (b, len(plan)))
                    if i + 1 < len(bracket.rungs):
                        current = schedule.promote(self._scores(current, rung.level),
                                                   bracket.rungs[i + 1].size, self.params)
                        if not current:
                            self.outcome.notes.append(
                                f"bracket {b + 1}: no candidate finished every fold at "
                                f"{rung.epochs} epochs; nothing to promote")
                            break
            ended = True
        except _BudgetStop as stop:
            self.outcome.state = stop.state
            self._drain()
            ended = True
        except KeyboardInterrupt:
            self.outcome.state = "interrupted"
            self.executor.shutdown(cancel=True)
            self._inflight.clear()
            raise
        except BaseException:
            self.outcome.state = "stopped"
            raise
        finally:
            self.outcome.cpu_s, self.outcome.epochs = self.cpu_s, self.epochs
            self.outcome.units_stored = len(self.finished)
            try:
                self.store.set_outcome(self.outcome.as_dict())
            except StoreError:
                if ended:  # else the error that stopped the loop says more
                    raise
            finally:
                self.progress.close()
        return self.outcome

    def _scores(self, current: Sequence[str], level: int) -> dict[str, float | None]:
        """Mean held-out accuracy over the folds; None unless every fold is done."""
        scores: dict[str, float | None] = {}
        for cand in current:
            accs = []
            for fold in range(self.k):
                status, acc = self.finished.get((cand, fold, level), (None, None))
                if status != "done" or acc is None:
                    break
                accs.append(acc)
            scores[cand] = float(np.mean(accs)) if len(accs) == self.k else None
        return scores

    def _task(self, cand: str, fold: int, rung: schedule.Rung) -> UnitTask:
        if cand not in self._training:  # the run's settings with the candidate's recipe
            self._training[cand] = tuple(sorted(training_for(self.s, cand).items()))
        # seeded by the architecture: recipes of one architecture start alike (paired)
        return UnitTask(cand, fold, rung.level, rung.epochs,
                        schedule.unit_seed(self.s.seed, arch_of(cand), fold, rung.level),
                        self.n_classes, self._training[cand],
                        # int8 figures for the finalists: units of the last rung only
                        self.s.int8 and rung.epochs == self.s.top_epochs)

    # ------------------------------------------------------------ one rung

    def _run_rung(self, current: Sequence[str], rung: schedule.Rung, where) -> None:
        tasks = [self._task(c, f, rung) for c in current for f in range(self.k)]
        todo = [t for t in tasks if t.key not in self.finished]
        b, nb = where
        self.progress.rung(b, nb, rung.level, self.n_levels, len(current), self.k,
                           rung.epochs, len(tasks) - len(todo))
        todo.sort(key=lambda t: -self.costs.get(t.candidate, 0.0))  # stable: ties keep order
        for task in todo:
            while len(self._inflight) >= self.executor.workers:
                self._collect()
            self._check_budget(task)  # with the latest finished units counted
            self._submit(task)
        self._drain()
        if self._lost:
            raise self._units_lost()

    def _check_budget(self, task: UnitTask) -> None:
        limit_e = self.s.budget_epochs
        if limit_e is not None and self.epochs + self._inflight_epochs + task.epochs > limit_e:
            raise _BudgetStop("budget_epochs")
        limit_c = self.s.budget_cpu_s
        if limit_c is None:
            return
        # forecast: what is in flight and this unit (search.cpu_forecast)
        ahead = self.forecast.total([(t.candidate, t.epochs)
                                     for t in (*self._inflight.values(), task)])
        if self.cpu_s >= limit_c or (ahead is not None and self.cpu_s + ahead > limit_c):
            raise _BudgetStop("budget_cpu")

    def _submit(self, task: UnitTask) -> None:
        try:
            future = self.executor.submit(task)
        except BrokenProcessPool:
            self._recover()
            future = self.executor.submit(task)
        except Exception as exc:
            gone = self.executor.gone(exc)
            if gone is None:
                raise
            raise self._executor_gone(gone) from None
        self._inflight[future] = task
        self._inflight_epochs += task.epochs

    def _drain(self) -> None:
        while self._inflight:
            self._collect()

    def _collect(self) -> None:
        done, _ = wait(list(self._inflight), return_when=FIRST_COMPLETED)
        broken, gone, again = False, None, []
        for future in sorted(done, key=lambda f: self._inflight[f].key):
            task = self._inflight[future]
            try:
                result = future.result()
            except BrokenProcessPool:
                broken = True
                continue
            except Exception as exc:  # outside the unit: run_unit returns its own failures
                self._forget(future)
                gone = gone or self.executor.gone(exc)
                again.append((task, describe(exc)))
                continue
            self._forget(future)
            self._keep(result)
        # Every result of this batch is stored before anything is submitted again.
        if gone is not None:
            raise self._executor_gone(gone)
        if broken:
            self._recover()
        for task, why in again:
            self._again(task, why)

    def _forget(self, future: Future) -> None:
        task = self._inflight.pop(future)
        self._inflight_epochs -= task.epochs

    def _lost_once(self, task: UnitTask, why: str) -> bool:
        """Count one outside failure of ``task``; False (and noted) when out of tries."""
        tries = self._tries[task.key] = self._tries.get(task.key, 0) + 1
        if tries >= ATTEMPTS:
            self._lost[task.key] = (task, f"{why}, {tries} times")
            return False
        self.outcome.retried += 1
        return True

    def _again(self, task: UnitTask, why: str) -> None:
        """After an outside failure: submit the unit again while it has tries left."""
        if self._lost_once(task, why):
            self._submit(task)

    def _recover(self) -> None:
        """After a worker crash: run each unit that was in flight alone (the crash
        counts as one lost run for each), again while it has tries left."""
        suspects = sorted(self._inflight.values(), key=lambda t: t.key)
        self._inflight.clear()
        self._inflight_epochs = 0
        self.executor.restart()
        why = describe(BrokenProcessPool())
        for task in suspects:
            while self._lost_once(task, why):
                try:
                    result = self.executor.submit(task).result()
                except BrokenProcessPool:
                    self.executor.restart()
                    continue
                except Exception as exc:  # e.g. out of memory in the worker
                    why = describe(exc)
                    continue
                self._keep(result)
                break

    def _units_lost(self) -> WorkersLostError:
        """The error that ends a session with units that got no result."""
        lost = sorted(self._lost.values(), key=lambda item: item[0].key)
        shown = "; ".join(f"{t.candidate} fold {t.fold} at {t.epochs} epochs: {why}"
                          for t, why in lost[:3])
        more = f"; and {len(lost) - 3} more" if len(lost) > 3 else ""
        n = len(lost)
        return WorkersLostError(
            f"{n} unit{'s' if n > 1 else ''} could not run: {shown}{more}. The "
            f"{len(self.finished)} finished units are kept in {self.store.path}. Run the "
            "same command again to run the rest; a unit whose worker dies every time may "
            "need more memory than a worker has (try fewer --workers)")

    def _executor_gone(self, why: str) -> WorkersLostError:
        """The error that ends a session whose executor can run nothing more."""
        self._inflight.clear()
        self._inflight_epochs = 0
        return WorkersLostError(
            f"{why}; the search stopped. The {len(self.finished)} finished units are kept "
            f"in {self.store.path}: {self.executor.how_to_resume()}")

    def _keep(self, result: UnitResult) -> None:
        self.store.record(result)
        key = result.task.key
        self.finished[key] = (result.status, result.held_acc)
        self.cpu_s += float(result.cpu_s)
        self.epochs += int(result.task.epochs)
        if result.status == "done":  # a diverged unit stopped early: no rate to learn
            self.forecast.add(result.task.candidate, int(result.task.epochs),
                              float(result.cpu_s))
        self.outcome.units_run += 1
        self.outcome.failed += result.status == "failed"
        self.outcome.diverged += result.status == "diverged"
        self.progress.unit(result, self.cpu_s, self.epochs)

