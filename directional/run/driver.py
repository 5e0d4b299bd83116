"""The driver: runs search generators against an objective.  The only place with side effects.

Theory of operation.  A search is a generator that yields a `records.Batch` of points and is sent
back a float array of their values, until it returns its result.  A whole run (noise estimate,
search, least-squares finish, curvature check and escapes) is one generator tree joined with
``yield from``; the driver drives one such tree (`Driver.run`) or many at once (`Driver.run_all`,
one per start of a many-start run), each under its own search id, all against one cache, one
budget rule, one log and one set of observers.  The points of every batch go to a
`concurrent.futures.Executor` (default: in this process, one at a time); at most ``workers`` are
in flight, and their results are taken back in the order they complete.  A search receives its
values only when its whole batch is back, in the order of the batch, so every search sees
exactly the values it would see alone: the outcome is the same whatever the executor, the
number of workers or the order of completion.  The only search of a run in process (no
executor, one run per point, nothing to replay) skips the queue: each batch is answered at once,
row by row, with the same steps in the same order as through the queue, which is the common
case and saves most of the driver's time per evaluation.

For each point a search asks for:

- an exact repeat (bit for bit) of a point evaluated, replayed or in flight is answered from
  that one evaluation: no point is evaluated twice (a cache hit is not counted);
- otherwise the objective is called with a fresh copy of the point (it may mutate it freely);
  an exception, NaN or ``+inf`` makes the evaluation *failed* and the search receives ``+inf``;
  a value that is not a real number raises `ObjectiveError` at once (a programming error).

The driver ends a search by throwing `records.Halt` into it (the innermost generator catches it
and returns what it has; the tree may go on with other work, whose new points are then subject
to the same limits):

- BUDGET: before a point new to the search when the search has asked for ``budget`` distinct
  points already (or for the batch's lower ``limit``: a stage that keeps evaluations for the
  next), and before a new evaluation when the run has made ``total`` or the time limit has
  passed.  Points of the batch before the limit are still evaluated: they count and reach the
  log, so nothing computed is lost;
- STALLED: at once when a point of the search's batch, taken in batch order, is ``-inf`` (the
  objective is unbounded below) or is the ``stall_after``-th failure in a row of that search;
  the rest of the batch is not evaluated; and before the `REPEATS_IN_A_ROW`-th point in a row
  that the search had asked for before (answered from the cache, they cost nothing and count
  against no budget: a search going round in a circle over known values);
- INTERRUPTED: Ctrl-C (see below).

A partial batch is never sent back.  A generator may yield `records.SPENT` instead of a batch:
it is sent back the number of distinct points its search has asked for (what a stage cost).
Every new evaluation is logged and reported to the ``observers`` (the journal, the progress
bar: they never wrap the objective) the moment it completes, with ``search``, the id of the
search that asked for it first, and ``sequence``, its place among the evaluations made for that
search (0, 1, 2, ... with no gap).

Replay (resuming a journal) is by point: the ``stored`` evaluations answer their points without
calling the objective, counted against the budget of the search that asks for them like live
ones, and are not reported again; they enter the log first, in the order they were made, so a
resumed run's log and best point are those of the uninterrupted run.  Since the search is
deterministic given its values, it asks for the stored points again; the points are compared bit
for bit (as keys of their float64 bytes), and a search that asks for a point the journal does not
hold while the journal still holds points of that search it has not asked for has diverged:
`JournalError` (the journal was written for other settings or by another version).  Replay by
point does not depend on the order in which the first run's evaluations completed, so a journal
written on a process pool is resumed in process and the other way round.  With ``retry`` a
stored evaluation that failed or timed out does not answer its point: the point is evaluated again
when a search asks for it (the journal keeps both records, the latest counts), and since its new
value may change the search's path, the searches waiting on it are no longer held to the journal.

Ctrl-C (and SIGTERM, SIGHUP: `interrupts.Interrupts`, the one handler).  When the run is in the
main thread and SIGINT has Python's default handler, the driver installs its own, or joins the one
the command line holds: a Ctrl-C while the objective runs in process, or while
the driver waits on the executor, raises `KeyboardInterrupt` there; one at any other moment is
noted and the run halts before the next evaluation.  An evaluation cut by it (or one that failed
in any way after it, e.g. an objective that turned the interrupt into its own error) is reported
to the observers with status ``interrupted`` and no value, never logged, and made again on
resume; evaluations in flight on an executor are abandoned (the workers of a pool made by
`workers.process_pool` are stopped, so a program they run ends at once).  Every search is then halted.

A worker process that dies breaks a process pool: the pool is replaced (``replace``), and the
evaluations that were in flight are run again one at a time; one that kills its worker while
running alone is recorded failed (detail `DIED`).  Any other error of the executor (a Dask
worker lost for good) makes that evaluation failed; the run goes on.

Replicates (``replicates = k`` of 2 or more, for a stochastic objective): each point a search asks
for is run k times, each run a separate evaluation through the executor (a pool runs them at
once), logged and reported with its own value and its own sequence number; when the k runs are
in, the search receives their mean (``combine``, by default `method.replicates.combined`: the mean
of the runs that succeeded, ``+inf`` when none did).  The cache, the replay and the limits above
are by point as before, but the budget counts runs: a point new to a search is asked only while
the search has spent fewer than ``limit`` runs and all k runs fit in ``budget`` (`SPENT` is
answered in runs).  Replay groups the stored rows of a point: k of them answer it; a point
interrupted part way (fewer rows) gets only its missing runs made, so nothing is repeated.  With
``retry`` the failed runs of a point are made again.  A search may ask `records.SPREAD`: it is
sent the pooled sample standard deviation of one run over the points it has been sent.
"""

from __future__ import annotations

import collections
import concurrent.futures as cf
import math
import time
import traceback
from collections.abc import Callable, Generator, Iterable, Mapping, Sequence
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field, fields, replace
from typing import Any

import numpy as np

from directional.errors import JournalError, ObjectiveError
from directional.method.replicates import combined, pooled
from directional.records import SPENT, SPREAD, Batch, Halt, Request, Spent, Spread, Status, Stop
from directional.run.interrupts import Interrupts
from directional.run.workers import process_pool, stop_workers

Objective = Callable[[np.ndarray], object]
Search = Generator[Request, Any, Any]
Observer = Callable[["Evaluation"], None]

DIED = "worker process died"
HALTS_IN_A_ROW = 10_000  # a generator halted this often with nothing evaluated has a bug
REPEATS_IN_A_ROW = 10_000  # a search asking only for points it has asked for goes in a circle
RETRIED = (Status.FAILED, Status.TIMED_OUT)  # stored statuses that a resume with ``retry`` redoes
# read once: looking a member up on its enum class costs about 0.2 µs, a few times per evaluation
_OK, _INTERRUPTED = Status.OK, Status.INTERRUPTED


@dataclass(frozen=True, slots=True, kw_only=True)
class Evaluation:
    """One call of the objective, as the journal and the reports see it."""

    index: int
    point: np.ndarray
    value: float  # +inf when failed
    status: str  # a `Status`; "interrupted" reaches the observers only, never the log
    detail: str = ""
    purpose: str = ""
    started: float = 0.0
    seconds: float = 0.0
    search: int = 0  # which search of a multi-start run asked for it
    sequence: int = 0  # its place among that search's evaluations


def _setters(record: type) -> tuple[Callable[[object, object], None], ...]:
    """The setters of a frozen slotted dataclass's fields, in their order."""
    return tuple(record.__dict__[f.name].__set__ for f in fields(record))


def _evaluation(
    index: int, point: np.ndarray, value: float, status: str, detail: str, purpose: str,
    started: float, seconds: float, search: int, sequence: int,
    *, _new: Callable[[type], Any] = object.__new__, _set: tuple = _setters(Evaluation),
) -> Evaluation:
    """``Evaluation(index=index, ...)``, made without the frozen dataclass's ``__init__``.

    That ``__init__`` sets each field through ``object.__setattr__``, more than twice the work of
    the fields' own setters; the driver makes one record per call of the objective.
    """
    made = _new(Evaluation)
    set0, set1, set2, set3, set4, set5, set6, set7, set8, set9 = _set
    set0(made, index)
    set1(made, point)
    set2(made, value)
    set3(made, status)
    set4(made, detail)
    set5(made, purpose)
    set6(made, started)
    set7(made, seconds)
    set8(made, search)
    set9(made, sequence)
    return made


@dataclass(slots=True, kw_only=True)
class Log:
    """Everything the driver did: the evaluations in order and the best one."""

    evaluations: list[Evaluation] = field(default_factory=list)
    best: Evaluation | None = None
    cache_hits: int = 0

    def add(self, evaluation: Evaluation, *, ranked: bool = True) -> None:
        """Log ``evaluation``; ``ranked`` False leaves it out of the best (one replicate)."""
        self.evaluations.append(evaluation)
        status = evaluation.status  # a `Status`, or its text when read from a journal
        if ranked and (status is _OK or status == _OK) and (  # as `rank`, without a call
            self.best is None or evaluation.value < self.best.value
        ):
            self.best = evaluation

    def rank(self, evaluation: Evaluation) -> None:
        """Make ``evaluation`` the best if it succeeded lower (a point's mean, with replicates)."""
        if evaluation.status == Status.OK and (
            self.best is None or evaluation.value < self.best.value
        ):
            self.best = evaluation


def as_value(result: object) -> float:
    """The objective's return value as a float; NaN stays NaN (a failure, decided by the caller).

    Accepted: int, float, numpy real scalars, and real arrays holding exactly one number.

    Raises
    ------
    ObjectiveError
        For anything else (None, str, complex, bool, arrays of another size).
    """
    if isinstance(result, bool | np.bool_):
        raise ObjectiveError(f"objective must return a real number, got a bool {result!r}")
    if isinstance(result, int | float | np.integer | np.floating):
        return float(result)
    if isinstance(result, np.ndarray) and result.dtype.kind in "iuf":
        if result.size == 1:
            return float(result.reshape(()))
        raise ObjectiveError(
            f"objective must return one number, got an array of shape {result.shape!r}"
        )
    text = repr(result)
    text = text if len(text) <= 80 else text[:77] + "..."
    raise ObjectiveError(
        f"objective must return a real number, got {type(result).__name__} {text}"
    )


def call(objective: Objective, x: np.ndarray) -> tuple[float, str, str]:
    """Evaluate once: ``(value, status, detail)``; failures give ``(inf, status, text)``."""
    try:
        result = objective(x.copy())
        value = result if type(result) is float else as_value(result)
    except ObjectiveError:
        raise
    except Exception as error:  # the objective's own failure: recorded, never fatal
        status = getattr(error, "status", Status.FAILED)
        detail = getattr(error, "detail", "") or describe(error)
        return math.inf, str(status), str(detail)
    if math.isnan(value) or value == math.inf:
        return math.inf, Status.FAILED, f"objective returned {value!r}"
    return value, _OK, ""


def evaluate(objective: Objective, x: np.ndarray) -> tuple[float, str, str, float, float]:
    """Evaluate once, inside a worker: ``(value, status, detail, started, seconds)``.

    A top-level function, so that process pools and Dask can send it by reference.

    Raises
    ------
    ObjectiveError
        When the objective returns something that is not a number (as `call`).
    """
    started = time.time()
    tick = time.perf_counter()
    value, status, detail = call(objective, x)
    return value, str(status), detail, started, time.perf_counter() - tick


def describe(error: BaseException) -> str:
    """An exception as one short text: its type and message (at most 2000 characters)."""
    lines = traceback.format_exception_only(type(error), error)
    return "".join(lines).strip()[-2000:]


def _status(text: str) -> str:
    """A `Status` where the text is one (an external program's error may carry its own)."""
    if type(text) is Status:  # no enum with members has subclasses
        return text
    try:
        return Status(text)
    except ValueError:
        return text


@dataclass(slots=True, kw_only=True)
class _Task:
    """One search and the batch it is waiting on."""

    ident: int
    search: Search
    batch: Batch | None = None
    serial: int = 0  # counts the batches, so that late results for a dropped batch are ignored
    values: list[float] = field(default_factory=list)  # of the batch's rows, inf until answered
    answered: list[bool] = field(default_factory=list)
    fresh: list[bool] = field(default_factory=list)  # rows asked, and whether new to the search
    taken: int = 0  # rows of the batch already taken in order (failures, -inf)
    halt: Halt | None = None  # a limit was met while asking: thrown once the rows asked are in
    seen: set[bytes] = field(default_factory=set)  # distinct points asked for: its budget
    journaled: set[bytes] = field(default_factory=set)  # its own points in the journal, unasked
    sequence: int = 0  # of the next evaluation made for this search
    failures_in_a_row: int = 0
    repeats_in_a_row: int = 0  # points asked in a row that the search had asked for before
    halts_in_a_row: int = 0
    ended: bool = False
    result: Any = None


@dataclass(slots=True, kw_only=True)
class _Pending:
    """A point queued or in flight, and the searches waiting for its value."""

    key: bytes
    point: np.ndarray
    purpose: str
    search: int
    waiters: list[tuple[int, int, int]] = field(default_factory=list)  # (task, serial, row)
    suspect: bool = False  # was in flight when a worker died: runs alone
    group: bytes | None = None  # one run of a replicated point: that point's key (waiters there)
    replicate: int = 0


@dataclass(slots=True, kw_only=True)
class _Group:
    """A point run ``replicates`` times: the runs ended so far and the searches waiting."""

    key: bytes
    point: np.ndarray
    runs: dict[int, float] = field(default_factory=dict)  # replicate number -> value
    waiters: list[tuple[int, int, int]] = field(default_factory=list)  # (task, serial, row)
    retried: bool = False  # makes stored failures again: its searches leave the journal


@dataclass(slots=True, kw_only=True)
class Driver:
    """Runs search generators against ``objective`` (see the module docstring).

    ``budget`` caps the distinct points each search asks for, ``total`` (None: no cap) the
    evaluations of the whole run, stored ones included.  ``executor`` None calls the objective
    in this process, one evaluation at a time.  ``workers`` caps the evaluations in flight on an
    executor (None: the executor's own number of workers when it says, as `concurrent.futures`
    pools do; else no cap).  ``replace`` makes a fresh pool when a worker death breaks
    ``executor`` (None: a process pool of the same size when ``executor`` is one, else the
    breakage is an error); pools made here are shut down by `close`, the caller's executor is
    left running.  ``observers`` are called with each new evaluation as it completes;
    ``stored`` are the evaluations of a journal being resumed; with ``retry`` their failed and
    timed-out points are evaluated again when asked for.  ``replicates`` runs each point that
    many times and ``combine(point, values)`` (default: `method.replicates.combined`) makes the
    value the search receives from the values of its runs, in replicate order.
    """

    objective: Objective
    budget: int
    executor: cf.Executor | None = None
    workers: int | None = None
    total: int | None = None
    time_limit: float | None = None
    stall_after: int = 50
    observers: Sequence[Observer] = ()
    stored: Iterable[Evaluation] = ()
    replace: Callable[[], cf.Executor] | None = None
    retry: bool = False
    replicates: int = 1
    combine: Callable[[np.ndarray, list[float]], float] | None = None
    log: Log = field(default_factory=Log)
    replayed: int = 0
    interrupted: bool = False
    _interrupts: Interrupts = field(default_factory=Interrupts)
    _cache: dict[bytes, float] = field(default_factory=dict)
    _made: dict[bytes, Evaluation] = field(default_factory=dict)
    _retry: set[bytes] = field(default_factory=set)  # stored failures to evaluate again
    _last: dict[int, int] = field(default_factory=dict)  # search -> its last stored sequence
    _journal: dict[int, dict[bytes, int]] = field(default_factory=dict)  # search -> point -> seq
    _tasks: dict[int, _Task] = field(default_factory=dict)
    _pending: dict[bytes, _Pending] = field(default_factory=dict)
    _queue: collections.deque[bytes] = field(default_factory=collections.deque)
    _flying: dict[cf.Future, bytes] = field(default_factory=dict)
    _groups: dict[bytes, _Group] = field(default_factory=dict)  # replicated points not yet in
    _replicated: dict[bytes, list[float]] = field(default_factory=dict)  # the runs of each point
    _owned: list[cf.Executor] = field(default_factory=list)
    _clock_start: float = field(default_factory=time.monotonic)
    _alone: bool = False  # this `run_all` drives one search, in process, one run per point
    _limited: bool = False  # a limit of the whole run (total budget, time) to check

    def __post_init__(self) -> None:
        if self.stall_after < 1:
            raise ValueError(f"stall_after must be at least 1, got {self.stall_after!r}")
        self._limited = self.total is not None or self.time_limit is not None
        if self.executor is None:
            self.workers = 1
        elif self.workers is None:  # a pool's own size, where it has one (not Dask's executor)
            self.workers = getattr(self.executor, "_max_workers", None)
        if self.replace is None and isinstance(self.executor, cf.ProcessPoolExecutor):
            size = self.workers or self.executor._max_workers
            self.replace = lambda: process_pool(size)
        for evaluation in sorted(self.stored, key=lambda e: e.index):
            key = evaluation.point.tobytes()
            if self.replicates > 1:
                self._replay_run(key, evaluation)
                continue
            earlier = self._made.get(key)
            if earlier is not None and earlier.status in RETRIED and evaluation.value != earlier.value:
                # a retry that succeeded: the failed search's later rows were an abandoned path
                own = self._journal.get(earlier.search, {})
                for old in [k for k, seq in own.items() if seq > earlier.sequence]:
                    del own[old]
            self._journal.setdefault(evaluation.search, {})[key] = evaluation.sequence
            last = self._last.get(evaluation.search, -1)
            self._last[evaluation.search] = max(last, evaluation.sequence)
            self._cache[key] = evaluation.value
            self._made[key] = evaluation
            self.log.add(replace(evaluation, index=len(self.log.evaluations)))
            self.replayed += 1
            if self.retry and evaluation.status in RETRIED:  # the latest record of a point counts
                self._retry.add(key)
            else:
                self._retry.discard(key)
        for key in self._retry:
            del self._cache[key]

    def _replay_run(self, key: bytes, evaluation: Evaluation) -> None:
        """A stored run of a replicated point: into its group (a later row replaces a failure)."""
        self._journal.setdefault(evaluation.search, {})[key] = evaluation.sequence
        self._last[evaluation.search] = max(self._last.get(evaluation.search, -1), evaluation.sequence)
        self._made[key] = evaluation
        self.log.add(replace(evaluation, index=len(self.log.evaluations)), ranked=False)
        self.replayed += 1
        group = self._groups.get(key)
        if group is None:
            group = self._groups[key] = _Group(key=key, point=evaluation.point.copy())
        if self.retry and evaluation.status in RETRIED:
            group.retried = True  # not a run: made again when the point is asked for
            return
        if len(group.runs) < self.replicates:
            group.runs[len(group.runs)] = evaluation.value
            return
        failed = [r for r, value in group.runs.items() if not math.isfinite(value)]
        if failed:  # a row written by a retry of that failure
            group.runs[failed[0]] = evaluation.value

    @property
    def spent(self) -> int:
        """Evaluations spent so far, replayed ones included (cache hits excluded)."""
        return len(self.log.evaluations)

    def close(self) -> None:
        """Shut down the pools this driver made (after a breakage); never the caller's."""
        for pool in self._owned:
            pool.shutdown(wait=True, cancel_futures=True)
        self._owned.clear()

    def __enter__(self) -> Driver:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    # ----------------------------------------------------------------------------- the loop

    def run(self, generator: Search, *, search: int = 0) -> Any:
        """Drive one generator to its end under search id ``search``; return what it returns.

        Raises
        ------
        ObjectiveError
            When the objective returns something that is not a number.
        JournalError
            When a replayed search asks for points the journal does not hold.
        """
        return self.run_all({search: generator})[search]

    def run_all(self, searches: Mapping[int, Search]) -> dict[int, Any]:
        """Drive every generator to its end, all at once; what each returns, by search id.

        A driver can run several groups one after another (the searches, then the checks of
        the distinct minima) with one cache, log and journal; a generator run under the id of a
        search that has ended continues that search's budget, sequence and journal.

        Raises
        ------
        ObjectiveError, JournalError
            As `run`.
        """
        tasks = [self._task(ident, search) for ident, search in searches.items()]
        self._alone = len(tasks) == 1 and self.executor is None and self.replicates == 1
        try:
            with self._interrupts:
                for task in tasks:
                    self._start(task)
                while not all(task.ended for task in tasks):
                    self._fill()
                    if not self._flying:
                        if not all(task.ended for task in tasks):  # a bug in the driver
                            raise RuntimeError("searches wait on points nobody evaluates")
                        break
                    try:
                        with self._interrupts.raising():
                            done, _ = cf.wait(list(self._flying), return_when=cf.FIRST_COMPLETED)
                    except KeyboardInterrupt:
                        self._interrupt()
                        continue
                    for future in done:
                        if future in self._flying:
                            self._collect(future)
        except BaseException:
            self._abandon()
            raise
        return {task.ident: task.result for task in tasks}

    def _task(self, ident: int, search: Search) -> _Task:
        task = self._tasks.get(ident)
        if task is None:
            task = self._tasks[ident] = _Task(ident=ident, search=search)
            own = self._journal.get(ident, {})
            task.journaled = set(own)
            task.sequence = 1 + self._last.get(ident, -1)  # the journal's are 0, 1, ...
        elif not task.ended:
            raise ValueError(f"search {ident!r} is still running")
        else:
            task.search, task.ended, task.result, task.batch = search, False, None, None
        return task

    def _start(self, task: _Task) -> None:
        try:
            batch = next(task.search)
        except StopIteration as done:
            task.ended, task.result = True, done.value
            return
        self._take(task, batch)

    def _take(self, task: _Task, batch: Batch | Spent | None) -> None:
        """Make ``batch`` the one ``task`` waits on, until the search waits or ends."""
        while batch is not None:
            if batch is SPENT or batch is SPREAD:  # a question, not a batch: answered at once
                try:
                    batch = task.search.send(self._question(task, batch))
                except StopIteration as done:
                    task.ended, task.result = True, done.value
                    return
                continue
            task.batch, task.serial = batch, task.serial + 1
            rows = len(batch.points)
            if self._alone and not task.journaled and not self._retry:
                batch = self._at_once(task, batch)
                continue
            task.values, task.answered = [math.inf] * rows, [False] * rows
            task.fresh, task.taken, task.halt = [], 0, None
            try:
                self._ask(task, batch)
            except Halt as halt:
                task.halt = halt
            batch = self._advance(task)

    def _question(self, task: _Task, question: Spent | Spread) -> object:
        """The answer to `SPENT` (runs spent) or `SPREAD` (the replicates' pooled scatter)."""
        if question is SPENT:
            return len(task.seen) * self.replicates
        runs = (self._replicated[key] for key in task.seen if key in self._replicated)
        spread = pooled(runs, self.replicates)
        return math.nan if spread is None else spread.run

    def _ask(self, task: _Task, batch: Batch) -> None:
        """Answer what is known, queue the rest; raise `Halt` at a point past the budget."""
        keys = [x.tobytes() for x in batch.points]
        if self._groups:  # stored replicated points whose runs are all in: their means
            for key in keys:
                group = self._groups.get(key)
                if group is not None and len(group.runs) >= self.replicates:
                    self._close(group)
        # a replayed search must ask for its journal's points: compared only while it holds some
        unasked = task.journaled - set(keys) if task.journaled else task.journaled
        new = [
            key not in self._cache and key not in self._pending and key not in self._retry
            and key not in self._groups
            for key in keys
        ] if unasked else []
        if any(new) and unasked:
            order = self._journal[task.ident]
            first = min(unasked, key=order.__getitem__)  # where a deterministic search diverged
            raise JournalError(
                f"the journal does not match this run at search {task.ident}, evaluation "
                f"{order[first]}: the journal holds the point {self._made[first].point.tolist()!r} "
                f"but the search asks for {batch.points[new.index(True)].tolist()!r}; the journal "
                "was written for other settings or by another version of directional"
            )
        limit = self.budget if batch.limit is None else min(self.budget, batch.limit)
        queued = self._pending
        for row, (x, key) in enumerate(zip(batch.points, keys)):
            fresh = self._admit(task, key, limit)
            task.fresh.append(fresh)
            if key in self._cache:
                if not fresh:
                    self.log.cache_hits += 1
                self._answer(task, row, self._cache[key])
            elif key in queued:
                queued[key].waiters.append((task.ident, task.serial, row))
            elif self.replicates > 1:
                self._replicate(key, x, batch.purpose, task, row)
            else:
                queued[key] = _Pending(
                    key=key, point=x.copy(), purpose=batch.purpose,
                    search=task.ident, waiters=[(task.ident, task.serial, row)],
                )
                self._queue.append(key)

    def _admit(self, task: _Task, key: bytes, limit: int) -> bool:
        """Count the point ``key`` as asked by ``task``; whether it is new to that search.

        Raises `Halt` (BUDGET) instead for a point new to the search once it has asked for
        ``limit`` points, or when the point's runs would pass the budget; and `Halt` (STALLED)
        for the `REPEATS_IN_A_ROW`-th point in a row that the search had asked for before.  Such
        points cost nothing and do not count against the budget, so a search whose known values
        lead it back to where it was would otherwise never end.
        """
        seen, k = task.seen, self.replicates
        fresh = key not in seen
        if fresh:
            if len(seen) * k >= limit or (len(seen) + 1) * k > self.budget:
                raise Halt(Stop.BUDGET, f"the budget of {limit} evaluations is spent")
            task.repeats_in_a_row = 0
        else:
            task.repeats_in_a_row += 1
            if task.repeats_in_a_row >= REPEATS_IN_A_ROW:
                raise Halt(Stop.STALLED, (
                    f"the search asked for {REPEATS_IN_A_ROW} points in a row that it had asked "
                    "for before: the values it knows lead it round in a circle"
                ))
        if task.journaled:
            task.journaled.discard(key)
        seen.add(key)
        return fresh

    def _at_once(self, task: _Task, batch: Batch) -> Batch | Spent | None:
        """The points of ``batch``, asked by the only search of a run in process, answered here;
        the search's next request, or None (it waits or has ended).

        The steps of `_ask`, `_fill`, `_finish` and `_advance`, in their order, without the
        queue and the rows' bookkeeping: nobody else waits, so the rows not known would be the
        next ones evaluated anyway, in the order of the batch.  As in `_ask`, every row is
        counted before any is evaluated, and the rows before a budget halt are evaluated first.
        A batch of one point (most of them: a line search's next point) takes the same steps
        without the rows' lists (`_one`).  The stall check (`_check`) is asked only where it can
        halt: the value is infinite, or the point is not new to the search, or it follows a
        failure (a finite value of a new point after a success leaves the failure count at 0).
        """
        points = batch.points
        rows = len(points)
        limit = self.budget if batch.limit is None else min(self.budget, batch.limit)
        if rows == 1:
            return self._one(task, batch, limit)
        raw = points.tobytes()  # the rows' keys, as `_ask` makes them (the batch is C-ordered)
        size = len(raw) // rows
        asked: list[tuple[bytes, bool, float | None]] = []
        over = None
        for row in range(rows):
            key = raw[row * size:(row + 1) * size]
            try:
                fresh = self._admit(task, key, limit)
            except Halt as halt:
                over = halt
                break
            value = self._cache.get(key)  # None: to evaluate, or a repeat of such a row
            if value is not None and not fresh:
                self.log.cache_hits += 1
            asked.append((key, fresh, value))
        values = []
        for row, (key, fresh, value) in enumerate(asked):
            if value is None:
                value = self._cache.get(key)  # made for an earlier row of this batch
            if value is None:
                try:
                    value = self._made_here(task, key, points[row], batch.purpose)
                except Halt as halt:
                    return self._halt(task, halt)
                if value is None:  # Ctrl-C: `_interrupt` has halted the search
                    return None
            values.append(value)
            if not (fresh and -math.inf < value < math.inf and not task.failures_in_a_row):
                halt = self._check(task, batch, row, value, fresh)  # only where it can halt
                if halt is not None:
                    return self._halt(task, halt)
        if over is not None:
            return self._halt(task, over)
        return self._send(task, np.array(values))

    def _one(self, task: _Task, batch: Batch, limit: int) -> Batch | Spent | None:
        """`_at_once` for a batch of one point."""
        key = batch.points.tobytes()
        try:
            fresh = self._admit(task, key, limit)
            value = self._cache.get(key)
            if value is None:
                value = self._made_here(task, key, batch.points[0], batch.purpose)
                if value is None:  # Ctrl-C: `_interrupt` has halted the search
                    return None
            elif not fresh:
                self.log.cache_hits += 1
        except Halt as halt:  # past the budget, or a limit of the whole run
            return self._halt(task, halt)
        if not (fresh and -math.inf < value < math.inf and not task.failures_in_a_row):
            halt = self._check(task, batch, 0, value, fresh)
            if halt is not None:
                return self._halt(task, halt)
        return self._send(task, np.array([value]))

    def _made_here(self, task: _Task, key: bytes, point: np.ndarray, purpose: str) -> float | None:
        """The value of the point ``key`` (``point``, a row of a batch of ``task``), evaluated
        here, logged and cached; None when Ctrl-C cut it (`_interrupt` has halted the search).

        Raises `Halt` instead when a limit of the whole run is met (`_run_limit`), asked only
        where one can be: the run has a total budget or a time limit, or was interrupted.
        """
        if self._limited or self.interrupted or self._interrupts.pending:
            halt = self._run_limit()
            if halt is not None:
                raise halt
        point = point.copy()
        evaluation = self._record(point, purpose, task.ident, self._here(point))
        if evaluation is None:
            return None
        self._keep(key, evaluation)
        return evaluation.value

    def _replicate(self, key: bytes, x: np.ndarray, purpose: str, task: _Task, row: int) -> None:
        """Wait on the mean of point ``x``'s runs; queue those neither made nor on their way."""
        group = self._groups.get(key)
        if group is None:
            group = self._groups[key] = _Group(key=key, point=x.copy())
        group.waiters.append((task.ident, task.serial, row))
        for r in range(self.replicates):
            run = key + r.to_bytes(4, "little")  # a key no point has: points are 8 n bytes
            if r in group.runs or run in self._pending:
                continue
            self._pending[run] = _Pending(
                key=run, point=group.point, purpose=purpose, search=task.ident, group=key,
                replicate=r,
            )
            self._queue.append(run)

    def _close(self, group: _Group) -> None:
        """All runs of a replicated point are in: cache their mean, answer who waits on it."""
        values = [group.runs[r] for r in sorted(group.runs)]
        combine = self.combine or (lambda _, runs: combined(runs))
        value = float(combine(group.point, values))
        del self._groups[group.key]
        self._cache[group.key] = value
        self._replicated[group.key] = values
        made = self._made.get(group.key)
        if made is not None and math.isfinite(value):
            self.log.rank(replace(made, value=value, status=Status.OK, detail=""))
        for ident, serial, row in group.waiters:
            task = self._tasks[ident]
            if group.retried:
                task.journaled.clear()  # the mean may differ from the stored one's
            if task.batch is None or task.serial != serial:
                continue  # that search was halted meanwhile
            self._answer(task, row, value)
            self._take(task, self._advance(task))

    def _waiters(self, pending: _Pending) -> list[tuple[int, int, int]]:
        return pending.waiters if pending.group is None else self._groups[pending.group].waiters

    def _answer(self, task: _Task, row: int, value: float) -> None:
        task.values[row] = float(value)
        task.answered[row] = True

    def _advance(self, task: _Task) -> Batch | Spent | None:
        """Take the rows answered in batch order; halt, send or wait.  The next batch, if any."""
        batch = task.batch
        assert batch is not None
        while task.taken < len(task.fresh) and task.answered[task.taken]:
            row = task.taken
            task.taken += 1
            halt = self._check(task, batch, row, task.values[row], task.fresh[row])
            if halt is not None:
                return self._halt(task, halt)
        if task.taken < len(task.fresh):
            return None  # waiting on a row
        if task.halt is not None:
            return self._halt(task, task.halt)
        return self._send(task, np.array(task.values))

    def _check(self, task: _Task, batch: Batch, row: int, value: float, fresh: bool) -> Halt | None:
        """Take the value of ``row``: the `Halt` (STALLED) that it calls for, if any."""
        if value == -math.inf:
            x = batch.points[row].tolist()
            return Halt(
                Stop.STALLED, f"the objective returned -inf at {x!r}: it is unbounded below there"
            )
        if not fresh:
            return None
        task.failures_in_a_row = 0 if value < math.inf else task.failures_in_a_row + 1
        if task.failures_in_a_row >= self.stall_after:  # at once, not at the next request
            made = self._made.get(batch.points[row].tobytes())
            last = (made.detail or made.status) if made is not None else "failed"
            return Halt(
                Stop.STALLED,
                f"the last {task.failures_in_a_row} evaluations all failed; last error: {last}",
            )
        return None

    def _send(self, task: _Task, values: np.ndarray) -> Batch | Spent | None:
        """Send a whole batch's values; the search's next request, or None when it has ended."""
        task.batch, task.halts_in_a_row = None, 0
        try:
            return task.search.send(values)
        except StopIteration as done:
            task.ended, task.result = True, done.value
            return None

    def _halt(self, task: _Task, halt: Halt) -> Batch | Spent | None:
        """Throw ``halt`` into the search; what it yields next (it may go on), or None."""
        self._drop(task)
        task.batch = None
        task.halts_in_a_row += 1
        if task.halts_in_a_row > HALTS_IN_A_ROW:
            task.search.close()
            raise RuntimeError("a search keeps asking for points after being halted")  # a bug
        try:
            return task.search.throw(halt)
        except StopIteration as done:
            task.ended, task.result = True, done.value
            return None

    def _drop(self, task: _Task) -> None:
        """Forget ``task``'s waits; points queued for nobody else are not evaluated."""
        for key in list(self._queue):
            pending = self._pending[key]
            if pending.group is not None:
                group = self._groups[pending.group]
                group.waiters = [w for w in group.waiters if w[0] != task.ident]
            else:
                pending.waiters = [w for w in pending.waiters if w[0] != task.ident]
            if not self._waiters(pending):
                self._queue.remove(key)
                del self._pending[key]

    def _halt_queued(self, halt: Halt) -> None:
        """A limit of the whole run: halt every search waiting on a point not yet started."""
        waiting = {ident for key in self._queue for ident, _, _ in self._waiters(self._pending[key])}
        for ident in sorted(waiting):
            task = self._tasks[ident]
            if task.batch is not None:
                self._take(task, self._halt(task, halt))

    def _run_limit(self, pending: _Pending | None = None) -> Halt | None:
        """Before a new evaluation starts: Ctrl-C, the total budget and the time limit.

        The first run of a replicated point needs room for all its runs in the total budget.
        """
        if self.interrupted or self._interrupts.pending:
            return Halt(Stop.INTERRUPTED, self._interrupts.reason)
        if self.total is not None:
            need = 1 if pending is None or pending.group is None else self.replicates - pending.replicate
            if len(self.log.evaluations) + len(self._flying) + need > self.total:
                return Halt(Stop.BUDGET, f"the total budget of {self.total} evaluations is spent")
        if self.time_limit is not None and time.monotonic() - self._clock_start > self.time_limit:
            return Halt(Stop.BUDGET, f"the time limit of {self.time_limit:g} s has passed")
        return None

    # ------------------------------------------------------------------ evaluating the points

    def _room(self) -> bool:
        if not self._flying:
            return self.workers is None or self.workers > 0
        if any(self._pending[k].suspect for k in self._flying.values()):
            return False
        return self.workers is None or len(self._flying) < self.workers

    def _fill(self) -> None:
        """Start queued points while there is room; on an executor suspects first, each alone."""
        if self.executor is not None:  # only a broken pool makes suspects
            suspects = [k for k in self._queue if self._pending[k].suspect]
            for key in suspects:
                self._queue.remove(key)
            self._queue.extendleft(reversed(suspects))
        while self._queue and self._room():
            key = self._queue[0]
            pending = self._pending[key]
            halt = self._run_limit(pending)
            if halt is not None:
                self._halt_queued(halt)
                continue
            if pending.suspect and self._flying:
                return
            if self.executor is None:
                self._queue.popleft()
                self._in_process(pending)
                continue
            try:
                with self._interrupts.raising():  # an in-process executor runs it in submit
                    future = self.executor.submit(evaluate, self.objective, pending.point)
            except cf.BrokenExecutor:
                self._broken()
                continue
            except KeyboardInterrupt:
                self._interrupt()
                continue
            self._queue.popleft()
            self._flying[future] = key

    def _in_process(self, pending: _Pending) -> None:
        """Call the objective here for ``pending`` and take the result."""
        self._finish(pending, self._here(pending.point))

    def _here(self, point: np.ndarray) -> tuple[float, str, str, float, float]:
        """Call the objective here: ``(value, status, detail, started, seconds)`` as `evaluate`;
        a Ctrl-C cuts it (the status is then `interrupted`)."""
        started = time.time()
        tick = time.perf_counter()
        try:
            value, status, detail = self._interrupts.calling(call, self.objective, point)
        except KeyboardInterrupt:
            value, status, detail = math.inf, _INTERRUPTED, self._interrupts.reason
        if status != _OK and self._interrupts.pending:  # failed because of the Ctrl-C
            value, status = math.inf, _INTERRUPTED
        return value, status, detail, started, time.perf_counter() - tick

    def _collect(self, future: cf.Future) -> None:
        key = self._flying[future]
        pending = self._pending[key]
        try:
            result = future.result()
        except BrokenProcessPool:
            self._broken()
            return
        except ObjectiveError:
            raise
        except Exception as error:  # the executor's failure, not the objective's
            detail = f"the executor failed: {describe(error)}"
            result = math.inf, Status.FAILED, detail, time.time(), 0.0
        del self._flying[future]
        self._finish(pending, result)

    def _finish(self, pending: _Pending, result: tuple[float, str, str, float, float]) -> None:
        """Take the ``result`` of a call, ``(value, status, detail, started, seconds)`` as
        `evaluate` gives it, for the point ``pending``."""
        del self._pending[pending.key]
        evaluation = self._record(pending.point, pending.purpose, pending.search, result)
        if evaluation is None:
            return
        value = evaluation.value
        if pending.group is not None:  # one run of a replicated point
            self.log.add(evaluation, ranked=False)
            self._made[pending.group] = evaluation
            self._notify(evaluation)
            group = self._groups[pending.group]
            group.runs[pending.replicate] = value
            if len(group.runs) >= self.replicates:
                self._close(group)
            return
        if pending.key in self._retry:  # a retried point: the searches may now take new paths
            self._retry.discard(pending.key)
            for ident, _, _ in pending.waiters:
                self._tasks[ident].journaled.clear()
        self._keep(pending.key, evaluation)
        for ident, serial, row in pending.waiters:
            task = self._tasks[ident]
            if task.batch is None or task.serial != serial:
                continue  # that search was halted meanwhile
            self._answer(task, row, value)
            self._take(task, self._advance(task))

    def _record(
        self, point: np.ndarray, purpose: str, search: int,
        result: tuple[float, str, str, float, float],
    ) -> Evaluation | None:
        """The `Evaluation` of a call that has ended (its ``result`` as `evaluate` gives it),
        numbered in the search that asked first.

        None for one that Ctrl-C cut: it is reported to the observers (made again on resume),
        never logged, and every search is halted (`_interrupt`).
        """
        owner = self._tasks[search]
        value, status, detail, started, seconds = result
        status = status if type(status) is Status else _status(status)
        evaluation = _evaluation(  # index is `spent`
            len(self.log.evaluations), point, value, status, detail, purpose, started, seconds,
            search, owner.sequence,
        )
        if status is _INTERRUPTED:
            self._notify(evaluation)
            self._interrupt()
            return None
        owner.sequence += 1
        return evaluation

    def _keep(self, key: bytes, evaluation: Evaluation) -> None:
        """Log, cache and report a new evaluation of the point ``key``."""
        self.log.add(evaluation)
        self._cache[key] = evaluation.value
        self._made[key] = evaluation
        for observer in self.observers:  # `_notify`, inline: once per evaluation
            observer(evaluation)

    def _notify(self, evaluation: Evaluation) -> None:
        for observer in self.observers:
            observer(evaluation)

    def _interrupt(self) -> None:
        """Ctrl-C: abandon what is in flight and halt every search that waits."""
        self.interrupted = True
        for future, key in list(self._flying.items()):
            future.cancel()
            self._pending.pop(key, None)
        if self._flying:
            stop_workers(self.executor)
        self._flying.clear()
        halt = Halt(Stop.INTERRUPTED, self._interrupts.reason)
        for task in list(self._tasks.values()):
            if task.batch is not None:
                self._take(task, self._halt(task, halt))

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
            old.shutdown(wait=False, cancel_futures=True)  # type: ignore[union-attr]
        alone = len(flying) == 1
        for pending in flying:
            if alone or pending.suspect:
                self._finish(pending, (math.inf, Status.FAILED, DIED, time.time(), 0.0))
            else:
                pending.suspect = True
                self._queue.appendleft(pending.key)

    def _abandon(self) -> None:
        """Cancel what is queued or in flight (an error ends the run)."""
        for future in self._flying:
            future.cancel()
        self._flying.clear()
        self._queue.clear()
        self._pending.clear()
