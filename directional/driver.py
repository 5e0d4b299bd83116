"""The driver: runs a search generator against an objective.  The only place with side effects.

Protocol.  The driver takes the first `Batch` from the generator, evaluates its points and sends
back a float array of the same length, until the generator returns its `Outcome`.  For each point:

- an exact repeat of an earlier point is answered from the cache (not counted, not re-run);
- otherwise the objective is called with a fresh copy of the point (it may mutate it freely);
  an exception, NaN or ``+inf`` makes the evaluation *failed* and the search receives ``+inf``;
  a value that is not a real number raises `ObjectiveError` at once (a programming error);
- ``-inf`` means the objective is unbounded below: the search is halted (STALLED, with the point).

The search is halted by throwing `Halt` into it when the budget of evaluations is spent
(BUDGET), the time limit has passed (BUDGET), Ctrl-C arrives (INTERRUPTED) or the last
``stall_after`` evaluations all failed (STALLED).  A partial batch is never sent back; the points of
it that were evaluated still count and still reach the log, so nothing computed is lost.
"""

from __future__ import annotations

import math
import time
import traceback
from collections.abc import Callable, Generator
from dataclasses import dataclass, field

import numpy as np

from .errors import ObjectiveError
from .records import Batch, Halt, Outcome, Stop

Objective = Callable[[np.ndarray], object]


@dataclass(frozen=True, slots=True, kw_only=True)
class Evaluation:
    """One call of the objective, as the journal and the reports see it."""

    index: int
    point: np.ndarray
    value: float  # +inf when failed
    status: str  # "ok", "failed", "timed-out"
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
    """Runs one search generator against a plain Python callable (see the module docstring).

    ``record`` is called with each new `Evaluation` as soon as it exists (the journal's hook).
    """

    objective: Objective
    budget: int
    time_limit: float | None = None
    stall_after: int = 50
    record: Callable[[Evaluation], None] | None = None
    log: Log = field(default_factory=Log)
    _cache: dict[bytes, float] = field(default_factory=dict)
    _failures_in_a_row: int = 0
    _clock_start: float = field(default_factory=time.monotonic)

    @property
    def spent(self) -> int:
        """Evaluations spent so far (cache hits excluded)."""
        return len(self.log.evaluations)

    def run(self, search: Generator[Batch, np.ndarray, Outcome]) -> Outcome:
        """Drive ``search`` to its end and return its outcome."""
        batch = next(search)
        while True:
            try:
                values = self._evaluate(batch)
            except Halt as halt:
                return _halt(search, halt)
            except KeyboardInterrupt:
                return _halt(search, Halt(Stop.INTERRUPTED, "interrupted by the user"))
            try:
                batch = search.send(values)
            except StopIteration as done:
                return done.value

    def _evaluate(self, batch: Batch) -> np.ndarray:
        values = np.empty(len(batch.points))
        for k, x in enumerate(batch.points):
            key = x.tobytes()
            if key in self._cache:
                self.log.cache_hits += 1
                values[k] = self._cache[key]
                continue
            self._check_limits()
            values[k] = self._cache[key] = self._one(x, batch.purpose)
        return values

    def _check_limits(self) -> None:
        if self.spent >= self.budget:
            raise Halt(Stop.BUDGET, f"the budget of {self.budget} evaluations is spent")
        if self.time_limit is not None and time.monotonic() - self._clock_start > self.time_limit:
            raise Halt(Stop.BUDGET, f"the time limit of {self.time_limit:g} s has passed")
        if self._failures_in_a_row >= self.stall_after:
            last = self.log.evaluations[-1]
            raise Halt(
                Stop.STALLED,
                f"the last {self._failures_in_a_row} evaluations all failed; last error: "
                f"{last.detail or last.status}",
            )

    def _one(self, x: np.ndarray, purpose: str) -> float:
        started = time.time()
        tick = time.perf_counter()
        value, status, detail = call(self.objective, x)
        evaluation = Evaluation(
            index=self.spent,
            point=x.copy(),
            value=value,
            status=status,
            detail=detail,
            purpose=purpose,
            started=started,
            seconds=time.perf_counter() - tick,
        )
        self.log.add(evaluation)
        if self.record is not None:
            self.record(evaluation)
        self._failures_in_a_row = 0 if status == "ok" else self._failures_in_a_row + 1
        if value == -math.inf:
            raise Halt(
                Stop.STALLED,
                f"the objective returned -inf at {x.tolist()!r}: it is unbounded below there",
            )
        return value


def _halt(search: Generator[Batch, np.ndarray, Outcome], halt: Halt) -> Outcome:
    """End the search with ``halt`` and return what it had."""
    try:
        search.throw(halt)
    except StopIteration as done:
        return done.value
    search.close()
    raise RuntimeError("a search yielded again after being halted")  # a bug in the search
