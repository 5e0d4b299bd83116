"""`minimize` and `line_minimum`: the public entry points that put search and driver together."""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import math
from collections.abc import Callable, Generator, Iterator, Sequence
from typing import Any

import numpy as np

from directional.errors import ObjectiveError, ProblemError
from directional.method.curvature import check_method, escape_count, settle, settled_solution
from directional.method.directions import DirectionSet, hessian_estimate
from directional.method.linesearch import LineResult, line_search
from directional.method.noise import floored, noise_level, noise_option
from directional.method.search import Settings, powell
from directional.method.space import Space, build_space
from directional.records import Batch, Curvature, Halt, Outcome, Stop, Verdict
from directional.run.driver import Driver, Objective
from directional.run.journal import journal_for, run_identity
from directional.run.pool import Lane, Runner
from directional.run.progress import Progress
from directional.solution import Solution


def default_budget(n: int) -> int:
    """Evaluations allowed when the caller sets no budget: 1000 (n + 1)."""
    return 1000 * (n + 1)


def minimize(
    objective: Objective,
    start: object,
    bounds: object = None,
    names: Sequence[str] | None = None,
    budget: int | None = None,
    *,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    time_limit: float | None = None,
    journal: object = None,
    check: bool | str = True,
    escapes: int = 3,
    noise: float | str | None = None,
    executor: object = None,
    progress: bool = False,
) -> Solution:
    """Return the minimum of ``objective`` found from ``start``, without derivatives.

    Powell's conjugate-direction search with safeguarded parabolic line searches (see
    `directional.method.search`), inside the bounds, in scaled coordinates.

    >>> import directional as dl
    >>> sol = dl.minimize(lambda x: (x[0] - 1) ** 2 + 10 * (x[1] - x[0] ** 2) ** 2, [-1.2, 1.0])
    >>> sol.point.round(4).tolist()
    [1.0, 1.0]

    Parameters
    ----------
    objective
        Called with one float array of the parameters; returns a number.  An exception, NaN or
        inf marks that point failed (the search avoids it); the start point must not fail.
    start
        Numbers, or a list of `Parameter` (then ``bounds`` and ``names`` stay None).
    bounds
        One ``(lower, upper)`` pair per parameter, None or inf for no bound.
    budget
        The most evaluations to spend (default 1000 (n + 1)).
    point_tolerance, value_tolerance
        Stop when, on two consecutive cycles, no scaled coordinate moved more than
        ``point_tolerance`` and the value fell by less than ``value_tolerance * max(1, |f|)``.
    time_limit
        Seconds of wall time after which no new evaluation starts.
    journal
        Path of an SQLite file that keeps every evaluation as it completes (`directional.run.journal`).
        An existing journal of the same problem is resumed, not overwritten: its evaluations are
        replayed, not repeated (a line on stderr says so); the budget counts them too, and may
        differ from the first run's.  A journal of another problem raises `JournalError`.
    check
        What proves the point a minimum (`directional.method.curvature`): True, a numerical Hessian with
        Richardson extrapolation and error estimate (about 6 n² + 1 evaluations); "quick", one
        central-difference stencil (at most 2 n² + 2 n + 1); False, none (the verdict stays UNCHECKED;
        ``sol.curvature`` then holds the free estimate from the line searches).  Parameters on a
        bound are left out and listed in ``sol.active``.
    escapes
        How many times a SADDLE or MAXIMUM is escaped along its direction of most negative
        curvature before the search gives up (default 3).
    noise
        The objective's noise level (standard deviation, in its units), or "estimate" to measure
        it at the start (`directional.method.noise`, Moré & Wild 2011).  It floors the value tolerance and
        the Hessian's steps.  Default None: rounding errors only.
    executor
        A `concurrent.futures.Executor` (a process pool, or a Dask cluster's
        ``client.get_executor()``) on which the points of a batch (both bracketing probes, the
        Hessian stencil) are evaluated at once.  A journal written this way is resumed by point:
        give ``dl.resume`` an executor too.  Default None: one evaluation at a time, in process.
    progress
        Show a progress bar on standard error (when it is a terminal).

    Raises
    ------
    ProblemError
        For a bad start, bounds, names, budget, tolerance, check, escapes or noise, before any
        evaluation.
    ObjectiveError
        When the start point fails, or the objective returns something that is not a number.
    JournalError
        When ``journal`` is not a journal, is damaged, is in use, or belongs to another problem.
    """
    space, settings, budget, method, escapes, noise = checked_arguments(
        "objective", objective, start, bounds, names, budget, point_tolerance, value_tolerance,
        time_limit, check, escapes, noise,
    )
    identity = run_identity(
        "minimize", space.parameters, settings,
        point_tolerance=point_tolerance, value_tolerance=value_tolerance, check=check,
        escapes=escapes, noise=noise,
    )
    if progress:
        objective = Progress(objective, budget=budget, enabled=None)
    with journal_for(journal, identity, budget=budget, objective=objective) as book, _driver(
        objective, budget, time_limit, executor, book
    ) as driver:
        level, noted = noise_level(driver, space, noise)
        settings = floored(settings, level)
        outcome = driver.run(powell(space, settings))
        settled = settle(
            driver, space, settings, outcome, check=method, escapes=escapes, noise=level
        )
        outcome = settled.outcome
        book.finish(outcome.stop, outcome.reason, replayed=driver.replayed)
        return settled_solution(
            _solution(space, settings, driver, outcome), settled, (*noted, *book.notes)
        )


@contextlib.contextmanager
def _driver(
    objective: Objective, budget: int, time_limit: float | None, executor: object, book: Any
) -> Iterator[Driver | Lane]:
    """The driver of one search: in process, or on ``executor`` (batches evaluated in parallel).

    On an executor the evaluations of a batch complete in any order, so its journal is replayed
    by point (`pool.Runner`); resume it with an executor too (any one, e.g. ``InProcess()``).
    """
    try:
        if executor is None:
            yield Driver(objective=objective, budget=budget, time_limit=time_limit, **book.hooks())
            return
        if not isinstance(executor, cf.Executor):
            raise ProblemError(f"executor must be a concurrent.futures.Executor, got {executor!r}")
        with Runner(
            objective=objective,
            budget=budget,
            time_limit=time_limit,
            executor=executor,
            workers=None,
            record=book.hooks().get("record"),
            known=book.stored,
            retry=book.retry,
        ) as runner:
            yield runner.lane()
    finally:
        if isinstance(objective, Progress):
            objective.close()


def checked_arguments(
    role: str,
    function: object,
    start: object,
    bounds: object,
    names: Sequence[str] | None,
    budget: int | None,
    point_tolerance: float,
    value_tolerance: float,
    time_limit: float | None,
    check: bool | str,
    escapes: int,
    noise: float | str | None,
) -> tuple[Space, Settings, int, str, int, float | str | None]:
    """The arguments `minimize` and `calibrate` share, validated before any evaluation.

    Returns the space, the search settings, the budget, the check method, the escape count and
    the noise option.

    Raises
    ------
    ProblemError
        Naming the argument (``role`` names the function: "objective" or "residuals").
    """
    if not callable(function):
        raise ProblemError(f"{role} must be callable, got {function!r}")
    space = build_space(start, bounds, names)
    settings = _settings(point_tolerance, value_tolerance)
    budget = _budget(budget, space.size)
    if time_limit is not None and (
        isinstance(time_limit, bool)
        or not (isinstance(time_limit, int | float) and time_limit > 0)
    ):
        raise ProblemError(f"time_limit must be a positive number of seconds, got {time_limit!r}")
    return space, settings, budget, check_method(check), escape_count(escapes), noise_option(noise)


def _settings(point_tolerance: float, value_tolerance: float) -> Settings:
    for key, value in (("point_tolerance", point_tolerance), ("value_tolerance", value_tolerance)):
        if isinstance(value, bool) or not isinstance(value, int | float) or not value > 0:
            raise ProblemError(f"{key} must be a positive number, got {value!r}")
        if not math.isfinite(value):
            raise ProblemError(f"{key} must be finite, got {value!r}")
    return Settings(point_tolerance=float(point_tolerance), value_tolerance=float(value_tolerance))


def _budget(budget: int | None, n: int) -> int:
    if budget is None:
        return default_budget(n)
    if isinstance(budget, bool) or not isinstance(budget, int | np.integer):
        raise ProblemError(f"budget must be a whole number of evaluations, got {budget!r}")
    if budget < n + 1:
        raise ProblemError(
            f"budget must allow at least n + 1 = {n + 1} evaluations, got {budget!r}"
        )
    return int(budget)


def _solution(space: Space, settings: Settings, driver: Driver, outcome: Outcome) -> Solution:
    log = driver.log
    if not log.evaluations:
        if outcome.stop is Stop.INTERRUPTED:  # Ctrl-C before anything was computed
            raise KeyboardInterrupt(outcome.reason)
        raise ObjectiveError(f"no evaluation was made: {outcome.reason or outcome.stop.value}")
    first = log.evaluations[0]
    if first.status != "ok" and outcome.cycles == 0 and outcome.stop is Stop.STALLED:
        raise ObjectiveError(
            f"the objective failed at the start point {first.point.tolist()!r}: "
            f"{first.detail or first.status}"
        )
    best = log.best
    if best is None:
        raise ObjectiveError(
            f"every evaluation failed ({len(log.evaluations)}); last error: "
            f"{log.evaluations[-1].detail}"
        )
    free = hessian_estimate(
        DirectionSet(
            vectors=outcome.directions,
            curvatures=outcome.curvatures,
            steps=np.zeros(space.size),
        )
    )
    return Solution(
        point=best.point.copy(),
        value=best.value,
        evaluations=len(log.evaluations),
        cycles=outcome.cycles,
        stop=outcome.stop,
        verdict=Verdict.UNCHECKED,
        active=_active(space, best.point, settings),
        curvature=None if free is None else _free_curvature(space, free),
        uncertainty=None,
        directions=_directions_in_search_coordinates(space, outcome.directions),
        names=space.names,
        units=tuple(p.unit for p in space.parameters),
        lower=space.lower.copy(),
        upper=space.upper.copy(),
        reason=_with_last_error(outcome, log.evaluations),
        history=tuple(log.evaluations),
    )


def _with_last_error(outcome: Outcome, evaluations: list) -> str:
    """The search's reason for stopping, with the last failure's text when it stalled on failures."""
    failed = [e for e in evaluations if e.status != "ok"]
    if outcome.stop is Stop.STALLED and failed and "last error" not in outcome.reason:
        return f"{outcome.reason}; last error: {failed[-1].detail or failed[-1].status}"
    return outcome.reason


def _active(space: Space, point: np.ndarray, settings: Settings) -> tuple[str, ...]:
    flags = space.on_bound(point, 10.0 * settings.point_tolerance)
    return tuple(name for name, flag in zip(space.names, flags) if flag)


def _directions_in_search_coordinates(space: Space, directions: np.ndarray) -> np.ndarray:
    rows = directions * space.scale
    return rows / np.linalg.norm(rows, axis=1, keepdims=True)


def _free_curvature(space: Space, scaled_hessian: np.ndarray) -> Curvature:
    """The free Hessian estimate, moved from scaled to search coordinates."""
    inverse_scale = 1.0 / space.scale
    hessian = scaled_hessian * np.outer(inverse_scale, inverse_scale)
    return curvature_record(hessian, None, "free")


def curvature_record(hessian: np.ndarray, error: np.ndarray | None, source: str) -> Curvature:
    """Eigen-decompose a symmetric Hessian into a `Curvature` record."""
    eigenvalues, eigenvectors = np.linalg.eigh(hessian)
    top = np.max(np.abs(eigenvalues))
    low = np.min(np.abs(eigenvalues))
    condition = math.inf if low == 0.0 else float(top / low)
    return Curvature(
        hessian=hessian,
        error=error,
        eigenvalues=eigenvalues,
        eigenvectors=eigenvectors,
        condition=condition,
        source=source,
    )


def line_minimum(
    f: Callable[[float], object],
    lower: float,
    upper: float,
    start: float | None = None,
    *,
    tolerance: float = 1e-8,
    budget: int = 100,
) -> LineResult:
    """Return the minimum of a function of one variable on ``[lower, upper]``.

    Bracketing from ``start`` (default: the golden-section point of the interval), then Brent's
    safeguarded successive parabolic interpolation to ``tolerance * (|t| + (upper - lower) / 1000)``,
    with ``tolerance`` no finer than the square root of the machine precision (Brent 1973, ch. 5)
    (`directional.method.linesearch`).  A failed evaluation counts as ``+inf``.

    >>> r = line_minimum(lambda t: (t - 2.0) ** 2 + 1.0, 0.0, 5.0)
    >>> round(r.point, 6), round(r.value, 6)
    (2.0, 1.0)

    Raises
    ------
    ProblemError
        For ``lower >= upper``, non-finite bounds, a start outside them, a bad tolerance or budget.
    ObjectiveError
        When ``f`` returns something that is not a number.
    """
    if not callable(f):
        raise ProblemError(f"f must be callable, got {f!r}")
    try:
        lower, upper = float(lower), float(upper)
        start = None if start is None else float(start)
    except (TypeError, ValueError):
        raise ProblemError(
            f"lower, upper and start must be numbers, got {lower!r}, {upper!r}, {start!r}"
        ) from None
    if not (math.isfinite(lower) and math.isfinite(upper)) or not lower < upper:
        raise ProblemError(f"need finite lower < upper, got [{lower!r}, {upper!r}]")
    if start is None:
        start = lower + 0.3819660112501051 * (upper - lower)
    if not lower <= start <= upper:
        raise ProblemError(f"start {start!r} lies outside [{lower!r}, {upper!r}]")
    if not (isinstance(tolerance, int | float) and 0 < tolerance < 1):
        raise ProblemError(f"tolerance must lie in (0, 1), got {tolerance!r}")
    if isinstance(budget, bool) or not isinstance(budget, int) or budget < 3:
        raise ProblemError(f"budget must be a whole number of at least 3, got {budget!r}")
    relative = max(float(tolerance), math.sqrt(np.finfo(float).eps))
    driver = Driver(objective=lambda x: f(float(x[0])), budget=budget)
    search = line_search(
        {},
        lower,
        upper,
        step=0.1 * (upper - lower),
        tolerance=1e-3 * relative * (upper - lower),
        relative=relative,
        start=float(start),
        limit=budget,
        exact=True,
    )
    return _drive_line(driver, search)


def _drive_line(driver: Driver, search: Generator[np.ndarray, np.ndarray, LineResult]) -> LineResult:
    """Run a scalar line search through the driver (budget, failures, cache)."""

    def as_points() -> Generator[Batch, np.ndarray, LineResult | None]:
        ts = next(search)
        try:
            while True:
                values = yield Batch(points=ts[:, None].copy(), purpose="line")
                ts = search.send(values)
        except StopIteration as done:
            return done.value
        except Halt:
            return None

    result = driver.run(as_points())
    best = driver.log.best
    if best is None:
        raise ObjectiveError("every evaluation of f failed")
    if result is None:
        return LineResult(
            point=float(best.point[0]),
            value=best.value,
            bracket=(float(best.point[0]), float(best.point[0])),
            curvature=math.nan,
            evaluations=driver.spent,
        )
    return result
