"""Run many search generators at once, their points evaluated on a `concurrent.futures.Executor`.

Theory of operation.  A `Runner` holds K search generators (`records.Batch` in, values out, as
for `driver.Driver`), each with the batch it is waiting on.  It queues the points nobody has
asked for yet, keeps at most ``workers`` of them in flight on the executor, and takes the results
back in the order they complete.  A search receives its values only when its whole batch is
back, in the order of the batch, so each search sees exactly the values it would see alone: the
outcome of every search is the same whatever the executor, the number of workers or the order
of completion (common practice for asynchronous multi-start, no source).

- An exact repeat of a point already evaluated, or in flight for another search, is answered
  from that one evaluation: no point is evaluated twice.
- Every new evaluation is recorded (the ``record`` hook: the journal) as it completes, with
  ``search``, the id of the search that asked first, and ``sequence``, its place among the
  evaluations recorded for that search (0, 1, 2, ... with no gap, whatever was in flight when a
  run was killed).
- ``known`` evaluations (from a journal being resumed) answer their points without running the
  objective: replay is by point, so it does not depend on the order in which the first run's
  evaluations completed.  A search that asks for a point the journal does not hold while the
  journal still holds points of its own has diverged: `JournalError`.
- Each search has its own budget, counted in the distinct points it asked for (so it does not
  depend on which search happened to evaluate a shared point first); ``total`` caps the
  evaluations of the whole run.  A search is ended by throwing `records.Halt` into it (budget,
  time limit, Ctrl-C, a run of failures, ``-inf``), as the single-search driver does.
- The objective runs in the worker through `driver.call`, so its exceptions come back as failed
  evaluations.  A worker process that dies breaks a process pool: the pool is replaced, and the
  evaluations that were in flight are run again one at a time; one that kills its worker while
  running alone is recorded failed (detail ``"worker process died"``).  Any other error of the
  executor (a Dask worker lost for good) makes that evaluation failed; the run goes on.
"""

from __future__ import annotations

import collections
import concurrent.futures as cf
import math
import pickle
import time
import traceback
from collections.abc import Callable, Iterable, Mapping
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field

import numpy as np

from directional.errors import JournalError, ObjectiveError, ProblemError
from directional.method.search import Search
from directional.records import Batch, Halt, Outcome, Stop
from directional.run.driver import RETRIED, Evaluation, Log, Objective, call
from directional.run.interrupts import Interrupts
from directional.run.workers import process_pool, stop_workers

DIED = "worker process died"


def evaluate(objective: Objective, x: np.ndarray) -> tuple[float, str, str, float, float]:
    """Evaluate once, inside a worker: ``(value, status, detail, started, seconds)``.

    A top-level function, so that process pools and Dask can send it by reference.

    Raises
    ------
    ObjectiveError
        When the objective returns something that is not a number (as `driver.call`).
    """
    started = time.time()
    tick = time.perf_counter()
    value, status, detail = call(objective, x)
    return value, status, detail, started, time.perf_counter() - tick


class InProcess(cf.Executor):
    """An executor that runs each call at once, in this process: the sequential default."""

    def submit(self, fn, /, *args, **kwargs):  # type: ignore[no-untyped-def]
        future: cf.Future = cf.Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except Exception as error:
            future.set_exception(error)
        return future


def check_picklable(objective: Objective) -> None:
    """Raise `ProblemError` unless ``objective`` can be sent to a process pool.

    Raises
    ------
    ProblemError
        For a lambda, a nested function or anything else `pickle` cannot send.
    """
    try:
        pickle.dumps(objective)
    except Exception as error:
        raise ProblemError(
            f"objective must be picklable to run on a process pool (define it at the top level "
            f"of a module, not as a lambda or nested function); {objective!r}: {error}"
        ) from None


@dataclass(slots=True, kw_only=True)
class _Task:
    """One search and the batch it is waiting on."""

    ident: int
    search: Search
    batch: Batch | None = None
    serial: int = 0  # counts the batches, so that late results for a dropped batch are ignored
    values: np.ndarray = field(default_factory=lambda: np.empty(0))
    missing: int = 0
    fresh: list[bool] = field(default_factory=list)  # points of the batch new to this search
    seen: set[bytes] = field(default_factory=set)  # distinct points asked for: its budget
    journaled: set[bytes] = field(default_factory=set)  # its own points in the journal, unasked
    sequence: int = 0  # of the next evaluation recorded for this search
    failures_in_a_row: int = 0
    outcome: Outcome | None = None


@dataclass(slots=True, kw_only=True)
class _Pending:
    """A point queued or in flight, and the searches waiting for its value."""

    key: bytes
    point: np.ndarray
    purpose: str
    search: int
    waiters: list[tuple[int, int, int]] = field(default_factory=list)  # (task, serial, row)
    suspect: bool = False  # was in flight when a worker died: runs alone
    future: cf.Future | None = None


@dataclass(slots=True, kw_only=True)
class Runner:
    """Runs many searches against ``objective`` on ``executor`` (see the module docstring).

    ``executor`` None runs in process, one evaluation at a time.  ``workers`` caps the
    evaluations in flight (None: the executor's own number of workers when it says, as
    `concurrent.futures` pools do; else no cap, every ready point is submitted).  ``replace``
    makes a fresh pool when a worker death breaks ``executor`` (None: a process pool of
    ``workers`` workers when ``executor`` is one, else the breakage is an error).  Pools made
    here are shut down by `close`; the caller's executor is left running.
    """

    objective: Objective
    budget: int
    workers: int | None = 1
    executor: cf.Executor | None = None
    total: int | None = None
    time_limit: float | None = None
    stall_after: int = 50
    record: Callable[[Evaluation], None] | None = None
    known: Iterable[Evaluation] = ()
    retry: bool = False  # known failed and timed-out points are evaluated again when asked for
    replace: Callable[[], cf.Executor] | None = None
    log: Log = field(default_factory=Log)
    replayed: int = 0
    interrupted: bool = False
    _interrupts: Interrupts = field(default_factory=Interrupts)
    _cache: dict[bytes, float] = field(default_factory=dict)
    _retry: set[bytes] = field(default_factory=set)
    _journal: dict[int, dict[bytes, int]] = field(default_factory=dict)  # search -> point -> seq
    _tasks: dict[int, _Task] = field(default_factory=dict)
    _pending: dict[bytes, _Pending] = field(default_factory=dict)
    _queue: collections.deque[bytes] = field(default_factory=collections.deque)
    _flying: dict[cf.Future, bytes] = field(default_factory=dict)
    _owned: list[cf.Executor] = field(default_factory=list)
    _clock_start: float = field(default_factory=time.monotonic)

    def __post_init__(self) -> None:
        if self.executor is None:
            self.executor = InProcess()
            self.workers = 1
        if self.workers is None:  # a pool's own size, where it has one (not Dask's executor)
            self.workers = getattr(self.executor, "_max_workers", None)
        if self.replace is None and isinstance(self.executor, cf.ProcessPoolExecutor):
            size = self.workers or self.executor._max_workers
            self.replace = lambda: process_pool(size)
        for evaluation in sorted(self.known, key=lambda e: e.index):
            key = evaluation.point.tobytes()
            self._journal.setdefault(evaluation.search, {})[key] = evaluation.sequence
            self._cache[key] = evaluation.value
            self.log.add(evaluation)
            self.replayed += 1
            if self.retry and evaluation.status in RETRIED:  # the latest record of a point counts
                self._retry.add(key)
            else:
                self._retry.discard(key)
        for key in self._retry:
            del self._cache[key]

    @property
    def spent(self) -> int:
        """Evaluations spent so far, replayed ones included (cache hits excluded)."""
        return len(self.log.evaluations)

    def close(self) -> None:
        """Shut down the pools this runner made (after a breakage); never the caller's."""
        for pool in self._owned:
            pool.shutdown(wait=True, cancel_futures=True)
        self._owned.clear()

    def __enter__(self) -> Runner:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def lane(self) -> Lane:
        """This runner seen as a `driver.Driver` that runs one generator at a time."""
        return Lane(self)

    # ----------------------------------------------------------------------------- the loop

    def run(self, searches: Mapping[int, Search]) -> dict[int, Outcome]:
        """Drive every search to its end; their outcomes by id.

        A runner can run several groups one after another (the searches, then the curvature
        checks) with one cache, log and journal; a generator run under the id of a search that
        has ended continues that search's budget, sequence and journal.

        Raises
        ------
        ObjectiveError
            When the objective returns something that is not a number.
        JournalError
            When a search asks for points that the journal being replayed does not hold.
        """
        tasks = []
        for ident, search in searches.items():
            task = self._tasks.get(ident)
            if task is None:
                task = self._tasks[ident] = _Task(ident=ident, search=search)
                own = self._journal.get(ident, {})
                task.journaled = set(own)
                task.sequence = 1 + max(own.values(), default=-1)  # the journal's are 0, 1, ...
            elif task.outcome is None:
                raise ValueError(f"search {ident!r} is still running")
            else:
                task.search, task.outcome, task.batch = search, None, None
            tasks.append(task)
        try:
            with self._interrupts:
                for task in tasks:
                    self._start(task)
                while any(task.outcome is None for task in tasks) or self._flying:
                    self._fill()
                    if not self._flying:
                        if any(task.outcome is None for task in tasks):
                            raise RuntimeError("searches wait on points nobody evaluates")  # a bug
                        break
                    with self._interrupts.raising():
                        done, _ = cf.wait(list(self._flying), return_when=cf.FIRST_COMPLETED)
                    for future in done:
                        if future in self._flying:
                            self._collect(future)
        except KeyboardInterrupt:
            self.interrupted = True
            self._abandon()
            stop_workers(self.executor)
            for task in tasks:
                if task.outcome is None:
                    self._halt(task, Halt(Stop.INTERRUPTED, self._interrupts.reason))
        except BaseException:
            self._abandon()
            raise
        return {task.ident: task.outcome for task in tasks}  # type: ignore[misc]

    def _start(self, task: _Task) -> None:
        try:
            batch = next(task.search)
        except StopIteration as done:
            task.outcome = done.value
            return
        self._take(task, batch)

    def _take(self, task: _Task, batch: Batch) -> None:
        """Make ``batch`` the one ``task`` waits on; answer what is known, queue the rest."""
        while True:
            task.batch, task.serial = batch, task.serial + 1
            task.values = np.full(len(batch.points), np.nan)
            task.missing, task.fresh = 0, []
            try:
                self._ask(task, batch)
            except Halt as halt:
                self._drop(task)
                self._halt(task, halt)
                return
            if task.missing:
                return
            nxt = self._send(task)
            if nxt is None:
                return
            batch = nxt

    def _ask(self, task: _Task, batch: Batch) -> None:
        new = [
            x.tobytes() not in self._cache
            and x.tobytes() not in self._pending
            and x.tobytes() not in self._retry
            for x in batch.points
        ]
        if any(new) and task.journaled - {x.tobytes() for x in batch.points}:
            raise JournalError(
                f"the journal does not match this problem: search {task.ident} asked for "
                f"{batch.points[new.index(True)].tolist()!r}, which the journal does not hold, "
                f"while it holds {len(task.journaled)} other points of that search"
            )
        for row, x in enumerate(batch.points):
            key = x.tobytes()
            fresh = key not in task.seen
            if fresh:
                self._own_limits(task)
            task.fresh.append(fresh)
            task.journaled.discard(key)
            if key in self._cache:
                if not fresh:
                    self.log.cache_hits += 1
                task.values[row] = self._cache[key]
            elif key in self._pending:
                self._pending[key].waiters.append((task.ident, task.serial, row))
                task.missing += 1
            else:
                self._run_limits()
                self._queue_point(task, x, key, batch.purpose, row)
            task.seen.add(key)

    def _own_limits(self, task: _Task) -> None:
        """Before a search asks for a point new to it: its own budget and run of failures.

        Checked whether or not another search has evaluated the point already, so that where a
        search stops does not depend on the others' timing.
        """
        if len(task.seen) >= self.budget:
            raise Halt(Stop.BUDGET, f"the budget of {self.budget} evaluations is spent")
        if task.failures_in_a_row >= self.stall_after:
            raise Halt(
                Stop.STALLED,
                f"the last {task.failures_in_a_row} evaluations of this search all failed",
            )

    def _run_limits(self) -> None:
        """Before a new evaluation: Ctrl-C, the total budget and the time limit."""
        if self.interrupted or self._interrupts.pending:
            raise Halt(Stop.INTERRUPTED, self._interrupts.reason)
        if self.total is not None and self.spent + len(self._pending) >= self.total:
            raise Halt(Stop.BUDGET, f"the total budget of {self.total} evaluations is spent")
        if self.time_limit is not None and time.monotonic() - self._clock_start > self.time_limit:
            raise Halt(Stop.BUDGET, f"the time limit of {self.time_limit:g} s has passed")

    def _queue_point(self, task: _Task, x: np.ndarray, key: bytes, purpose: str, row: int) -> None:
        pending = _Pending(key=key, point=x.copy(), purpose=purpose, search=task.ident)
        pending.waiters.append((task.ident, task.serial, row))
        task.missing += 1
        self._pending[key] = pending
        self._queue.append(key)

    def _send(self, task: _Task) -> Batch | None:
        """Send the completed batch to the search; its next batch, or None when it ended."""
        values = task.values
        for value, fresh in zip(values, task.fresh):
            if fresh:
                task.failures_in_a_row = 0 if math.isfinite(value) else task.failures_in_a_row + 1
        if np.any(values == -math.inf):
            batch = task.batch
            task.batch = None
            x = batch.points[int(np.argmin(values))].tolist()
            self._halt(
                task,
                Halt(Stop.STALLED, f"the objective returned -inf at {x!r}: it is unbounded below"),
            )
            return None
        task.batch = None
        try:
            return task.search.send(values)
        except StopIteration as done:
            task.outcome = done.value
            return None

    def _halt(self, task: _Task, halt: Halt) -> None:
        task.batch = None
        try:
            task.search.throw(halt)
        except StopIteration as done:
            task.outcome = done.value
            return
        task.search.close()
        raise RuntimeError("a search yielded again after being halted")  # a bug in the search

    def _drop(self, task: _Task) -> None:
        """Forget ``task``'s waits; points queued for nobody else are not evaluated."""
        for key in list(self._queue):
            pending = self._pending[key]
            pending.waiters = [w for w in pending.waiters if w[0] != task.ident]
            if not pending.waiters:
                self._queue.remove(key)
                del self._pending[key]

    # ------------------------------------------------------------------ executor and results

    def _room(self) -> bool:
        if any(self._pending[k].suspect for k in self._flying.values()):
            return False
        return self.workers is None or len(self._flying) < self.workers

    def _fill(self) -> None:
        """Submit queued points while there is room; suspects first, and each alone."""
        suspects = [k for k in self._queue if self._pending[k].suspect]
        for key in suspects:
            self._queue.remove(key)
        self._queue.extendleft(reversed(suspects))
        while self._queue and self._room():
            key = self._queue[0]
            pending = self._pending[key]
            if pending.suspect and self._flying:
                return
            try:
                with self._interrupts.raising():  # an in-process objective runs in submit
                    future = self.executor.submit(evaluate, self.objective, pending.point)  # type: ignore[union-attr]
            except cf.BrokenExecutor:
                self._broken()
                continue
            self._queue.popleft()
            pending.future = future
            self._flying[future] = key

    def _collect(self, future: cf.Future) -> None:
        key = self._flying[future]
        pending = self._pending[key]
        try:
            value, status, detail, started, seconds = future.result()
        except BrokenProcessPool:
            self._broken()
            return
        except ObjectiveError:
            raise
        except Exception as error:  # the executor's failure, not the objective's
            value, status, started, seconds = math.inf, "failed", time.time(), 0.0
            detail = f"the executor failed: {_describe(error)}"
        del self._flying[future]
        self._finish(pending, value, status, detail, started, seconds)

    def _finish(
        self, pending: _Pending, value: float, status: str, detail: str, started: float, seconds: float
    ) -> None:
        del self._pending[pending.key]
        owner = self._tasks[pending.search]
        evaluation = Evaluation(
            index=self.spent,
            point=pending.point,
            value=value,
            status=status,
            detail=detail,
            purpose=pending.purpose,
            started=started,
            seconds=seconds,
            search=pending.search,
            sequence=owner.sequence,
        )
        owner.sequence += 1
        if pending.key in self._retry:  # a retried point: the searches may now take new paths
            self._retry.discard(pending.key)
            for ident, _, _ in pending.waiters:
                self._tasks[ident].journaled.clear()
        self.log.add(evaluation)
        self._cache[pending.key] = value
        if self.record is not None:
            self.record(evaluation)
        for ident, serial, row in pending.waiters:
            task = self._tasks[ident]
            if task.batch is None or task.serial != serial:
                continue  # that search was halted meanwhile
            task.values[row] = value
            task.missing -= 1
            if task.missing == 0:
                batch = self._send(task)
                if batch is not None:
                    self._take(task, batch)

    def _broken(self) -> None:
        """A worker died and broke the pool: replace it, rerun or fail what was in flight."""
        if self.replace is None:
            raise RuntimeError(f"the executor {self.executor!r} is broken and cannot be replaced")
        flying = [self._pending[k] for k in self._flying.values()]
        self._flying.clear()
        old = self.executor
        self.executor = self.replace()
        self._owned.append(self.executor)
        if old in self._owned:
            self._owned.remove(old)
            old.shutdown(wait=False, cancel_futures=True)
        alone = len(flying) == 1
        for pending in flying:
            pending.future = None
            if alone or pending.suspect:
                self._finish(pending, math.inf, "failed", DIED, time.time(), 0.0)
            else:
                pending.suspect = True
                self._queue.appendleft(pending.key)

    def _abandon(self) -> None:
        """Cancel what is queued or in flight (an interrupt or an error ends the run)."""
        for future in self._flying:
            future.cancel()
        self._flying.clear()
        self._queue.clear()
        self._pending.clear()


def _describe(error: BaseException) -> str:
    lines = traceback.format_exception_only(type(error), error)
    return "".join(lines).strip()[-2000:]


class Lane:
    """A `Runner` with the interface of `driver.Driver` that `curvature.settle` uses.

    ``run(generator, search=k)`` drives one generator under search id ``k`` (its points still go
    to the executor, a batch such as a Hessian stencil in parallel); ``spent`` counts evaluations.
    """

    def __init__(self, runner: Runner) -> None:
        self.runner = runner

    @property
    def spent(self) -> int:
        return self.runner.spent

    @property
    def replayed(self) -> int:
        return self.runner.replayed

    @property
    def budget(self) -> int:
        """The search's budget (calibration narrows it for a while, as on `driver.Driver`)."""
        return self.runner.budget

    @budget.setter
    def budget(self, value: int) -> None:
        self.runner.budget = value

    @property
    def log(self) -> Log:
        return self.runner.log

    def run(self, generator: Search, *, search: int = 0) -> Outcome:
        return self.runner.run({search: generator})[search]
