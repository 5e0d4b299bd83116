"""The driver: runs a search generator against an objective.  The only place with side effects.

Protocol.  The driver takes the first `Batch` from the generator, evaluates its points and sends
back a float array of the same length, until the generator returns its `Outcome`.  For each point:

- an exact repeat of an earlier point is answered from the cache (not counted, not re-run);
- otherwise the objective is called with a fresh copy of the point (it may mutate it freely);
  an exception, NaN or ``+inf`` makes the evaluation *failed* and the search receives ``+inf``;
  a value that is not a real number raises `ObjectiveError` at once (a programming error);
- ``-inf`` means the objective is unbounded below: the search is halted (STALLED, with the point).

The search is halted by throwing `Halt` into it when the budget of evaluations is spent (BUDGET),
the time limit has passed (BUDGET), Ctrl-C arrives (INTERRUPTED) or the last ``stall_after``
evaluations all failed (STALLED, at once after the failure that makes them so). A partial batch is
never sent back; the points of it that were evaluated still count and still reach the log, so
nothing computed is lost.

Every evaluation carries the id of the search that asked for it (``run(..., search=k)``, 0 by
default) and its ``sequence``, its place among that search's evaluations; several generators run
one after another under the same id (the search, then the curvature check) continue its sequence.

Replay (resuming a journal).  ``replay`` holds stored evaluations per search id, in sequence order.
While a search has stored evaluations left, the point it asks for is compared bit for bit with the
stored one (a difference raises `JournalError`: the journal was written for other settings or by
another version), and the stored value is sent without calling the objective.  A replayed
evaluation is logged, cached and counted against the budget like a live one, but not recorded
again.  The search is deterministic given its values, so it then goes on live from exactly where
the journal ends.  With ``retry`` a stored evaluation that failed or timed out is made again
when the search asks for its point, and recorded under the same sequence number.

Ctrl-C (and SIGTERM, SIGHUP: `interrupts.Interrupts`, the one handler). When the run is in the
main thread and SIGINT has Python's default handler, the driver installs its own for the duration
of `Driver.run`, or joins the one the command line holds: a Ctrl-C while the objective runs raises
`KeyboardInterrupt` there as usual (the evaluation is recorded with status ``interrupted`` and no
value, and is made again on resume; so is one that failed in any way after the Ctrl-C, e.g. an
objective that turned the interrupt into its own error); a Ctrl-C at any other moment is noted, and
the run halts before the next evaluation. So an interrupt never lands in the middle of the driver's
or the journal's bookkeeping.
"""

from __future__ import annotations

import math
import time
import traceback
from collections.abc import Callable, Generator, Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from directional.errors import JournalError, ObjectiveError
from directional.records import Batch, Halt, Outcome, Stop
from directional.run.interrupts import Interrupts

Objective = Callable[[np.ndarray], object]
RETRIED = ("failed", "timed-out")  # stored statuses that a resume with ``retry`` makes again


@dataclass(frozen=True, slots=True, kw_only=True)
class Evaluation:
    """One call of the objective, as the journal and the reports see it."""

    index: int
    point: np.ndarray
    value: float  # +inf when failed
    status: str  # "ok", "failed", "timed-out"; "interrupted" (journal only, never in the log)
    detail: str = ""
    purpose: str = ""
    started: float = 0.0
    seconds: float = 0.0
    search: int = 0  # which search of a multi-start run asked for it
    sequence: int = 0  # its place among that search's evaluations


@dataclass(slots=True, kw_only=True)
class Log:
    """Everything the driver did: the evaluations in order and the best one."""

    evaluations: list[Evaluation] = field(default_factory=list)
    best: Evaluation | None = None
    cache_hits: int = 0

    def add(self, evaluation: Evaluation) -> None:
        self.evaluations.append(evaluation)
        if evaluation.status == "ok" and (self.best is None or evaluation.value < self.best.value):
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
        value = as_value(objective(x.copy()))
    except ObjectiveError:
        raise
    except Exception as error:  # the objective's own failure: recorded, never fatal
        status = getattr(error, "status", "failed")
        detail = getattr(error, "detail", "") or _describe(error)
        return math.inf, str(status), str(detail)
    if math.isnan(value) or value == math.inf:
        return math.inf, "failed", f"objective returned {value!r}"
    return value, "ok", ""


def _describe(error: BaseException) -> str:
    lines = traceback.format_exception_only(type(error), error)
    return "".join(lines).strip()[-2000:]


@dataclass(slots=True, kw_only=True)
class Driver:
    """Runs search generators against a plain Python callable (see the module docstring).

    ``record`` is called with each new `Evaluation` as soon as it exists (the journal's hook);
    ``replay`` holds the evaluations of a journal being resumed, per search id, in sequence order.
    ``replayed`` counts the evaluations taken from it.
    """

    objective: Objective
    budget: int
    time_limit: float | None = None
    stall_after: int = 50
    record: Callable[[Evaluation], None] | None = None
    replay: Mapping[int, Sequence[Evaluation]] = field(default_factory=dict)
    log: Log = field(default_factory=Log)
    replayed: int = 0
    retry: bool = False  # stored failed and timed-out evaluations are made again (see `_one`)
    _diverged: set[int] = field(default_factory=set)
    _cache: dict[bytes, float] = field(default_factory=dict)
    _sequence: dict[int, int] = field(default_factory=dict)
    _failures_in_a_row: int = 0
    _clock_start: float = field(default_factory=time.monotonic)
    _interrupts: Interrupts = field(default_factory=Interrupts)

    @property
    def spent(self) -> int:
        """Evaluations spent so far, replayed ones included (cache hits excluded)."""
        return len(self.log.evaluations)

    def run(self, generator: Generator[Batch, np.ndarray, Outcome], *, search: int = 0) -> Outcome:
        """Drive ``generator`` to its end and return its outcome; its evaluations carry ``search``.

        Raises
        ------
        ObjectiveError
            When the objective returns something that is not a number.
        JournalError
            When a replayed search asks for a point other than the stored one, or a row cannot
            be written.
        """
        with self._interrupts:
            try:
                batch = next(generator)
            except StopIteration as done:  # a generator with nothing to evaluate
                return done.value
            while True:
                try:
                    values = self._evaluate(batch, search)
                except Halt as halt:
                    return _halt(generator, halt)
                except KeyboardInterrupt:  # only without our handler (not the main thread)
                    return _halt(generator, Halt(Stop.INTERRUPTED, "interrupted by the user"))
                try:
                    batch = generator.send(values)
                except StopIteration as done:
                    return done.value

    def _evaluate(self, batch: Batch, search: int) -> np.ndarray:
        values = np.empty(len(batch.points))
        for k, x in enumerate(batch.points):
            key = x.tobytes()
            if key in self._cache:
                self.log.cache_hits += 1
                values[k] = self._cache[key]
                continue
            self._check_limits()
            values[k] = self._cache[key] = self._one(x, batch.purpose, search)
        return values

    def _check_limits(self) -> None:
        if self._interrupts.pending:
            raise Halt(Stop.INTERRUPTED, self._interrupts.reason)
        if self.spent >= self.budget:
            raise Halt(Stop.BUDGET, f"the budget of {self.budget} evaluations is spent")
        if self.time_limit is not None and time.monotonic() - self._clock_start > self.time_limit:
            raise Halt(Stop.BUDGET, f"the time limit of {self.time_limit:g} s has passed")

    def _one(self, x: np.ndarray, purpose: str, search: int) -> float:
        sequence = self._sequence.get(search, 0)
        self._sequence[search] = sequence + 1
        stored = self._stored(search, sequence)
        if stored is not None and self.retry and stored.status in RETRIED:
            # Made again live under the same sequence number (the journal keeps both rows); a
            # new value changes the search's path, so the rest of its stored evaluations go.
            _replayed(stored, x, purpose, self.spent)  # the same point, or JournalError
            evaluation = self._live(x, purpose, search, sequence)
            if evaluation.value != stored.value:
                self._diverged.add(search)
            self.log.add(evaluation)
            if self.record is not None:
                self.record(evaluation)
        elif stored is not None:
            evaluation = _replayed(stored, x, purpose, self.spent)
            self.replayed += 1
            self.log.add(evaluation)
        else:
            evaluation = self._live(x, purpose, search, sequence)
            self.log.add(evaluation)
            if self.record is not None:
                self.record(evaluation)
        value = evaluation.value
        self._failures_in_a_row = 0 if evaluation.status == "ok" else self._failures_in_a_row + 1
        if value == -math.inf:
            raise Halt(
                Stop.STALLED,
                f"the objective returned -inf at {x.tolist()!r}: it is unbounded below there",
            )
        if self._failures_in_a_row >= self.stall_after:  # at once, not at the next request
            raise Halt(
                Stop.STALLED,
                f"the last {self._failures_in_a_row} evaluations all failed; last error: "
                f"{evaluation.detail or evaluation.status}",
            )
        return value

    def _stored(self, search: int, sequence: int) -> Evaluation | None:
        stored = () if search in self._diverged else self.replay.get(search, ())
        return stored[sequence] if sequence < len(stored) else None

    def _live(self, x: np.ndarray, purpose: str, search: int, sequence: int) -> Evaluation:
        started = time.time()
        tick = time.perf_counter()
        try:
            with self._interrupts.raising():
                value, status, detail = call(self.objective, x)
        except KeyboardInterrupt:
            value, status, detail = math.inf, "interrupted", self._interrupts.reason
        if status != "ok" and self._interrupts.pending:  # failed because of the Ctrl-C
            value, status = math.inf, "interrupted"
        evaluation = Evaluation(
            index=self.spent,
            point=x.copy(),
            value=value,
            status=status,
            detail=detail,
            purpose=purpose,
            started=started,
            seconds=time.perf_counter() - tick,
            search=search,
            sequence=sequence,
        )
        if status == "interrupted":  # journaled, to be made again on resume; never logged
            if self.record is not None:
                self.record(evaluation)
            raise Halt(Stop.INTERRUPTED, self._interrupts.reason)
        return evaluation


def _replayed(stored: Evaluation, x: np.ndarray, purpose: str, index: int) -> Evaluation:
    """The stored evaluation as the answer to ``x``, after checking that it is for ``x``.

    Raises
    ------
    JournalError
        When the stored point differs from ``x`` in any bit.
    """
    if stored.point.tobytes() != x.tobytes():
        raise JournalError(
            f"the journal does not match this run at search {stored.search}, evaluation "
            f"{stored.sequence}: the journal holds the point {stored.point.tolist()!r} but the "
            f"search asks for {x.tolist()!r}; the journal was written for other settings or by "
            "another version of directional"
        )
    return replace(stored, index=index, point=x.copy(), purpose=purpose or stored.purpose)


def _halt(search: Generator[Batch, np.ndarray, Outcome], halt: Halt) -> Outcome:
    """End the search with ``halt`` and return what it had."""
    try:
        search.throw(halt)
    except StopIteration as done:
        return done.value
    search.close()
    raise RuntimeError("a search yielded again after being halted")  # a bug in the search
