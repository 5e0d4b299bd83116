"""`minimize`, `line_minimum` and `estimate_noise`: entry points that put method and driver together."""

from __future__ import annotations

import concurrent.futures as cf
import math
from collections.abc import Callable, Generator, Sequence
from typing import Any

import numpy as np

from directional.api.options import Options, minimize_options
from directional.api.session import session, solution, with_replicates
from directional.errors import ObjectiveError, ProblemError
from directional.method.curvature import Settled, settle, settled_solution
from directional.method.linesearch import LineResult, line_search
from directional.method.noise import (
    FAILED,
    NoiseLevel,
    check_options,
    estimate,
    noticed,
    planned,
)
from directional.method.replicates import planned_level, pooled_level
from directional.method.search import Settings, powell
from directional.method.space import build_space
from directional.records import Batch, Halt, Purpose, Request, Status
from directional.run.driver import Driver, Objective
from directional.solution import Solution


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
    replicates: int = 1,
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
        The most evaluations to spend (default 1000 (n + 1)); each replicate is one.
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
        the Hessian's steps, and the search works above it (`directional.method.search`): its
        answer is then the point its regression model puts lowest, and ``sol.noise`` gives the
        ± of ``sol.value``.  Default None: not stated; the search measures the noise when its
        values have calmed, and works above it when it is more than rounding (a note says so);
        with ``replicates``, the level read off the replicates at the start.  "none": rounding
        errors only, nothing measured.
    replicates
        Run each point this many times and give the search their mean (default 1), for an
        objective known to be stochastic (`directional.method.replicates`).  Every run is an
        evaluation of its own: counted against ``budget`` (default then k times as large),
        journaled with its value, sent to ``executor`` as a separate task.  A point's value is
        the mean of its runs that succeeded; it fails only when all of them do.  With 2 or more,
        the sample standard deviation of the start's runs divided by sqrt(k) is the noise level
        when ``noise`` is not a number, and ``sol.spread`` reports the pooled one of all points.
    executor
        A `concurrent.futures.Executor` (a process pool, or a Dask cluster's
        ``client.get_executor()``) on which the points of a batch (both bracketing probes, the
        Hessian stencil) are evaluated at once, with the same result as in process; a journal
        written either way resumes either way.  Default None: one evaluation at a time, in
        process.
    progress
        Show a progress bar on standard error (when it is a terminal); the driver tells it of
        each evaluation, so it works with any executor.

    Raises
    ------
    ProblemError
        For a bad start, bounds, names, budget, tolerance, check, escapes, noise or replicates,
        before any evaluation.
    ObjectiveError
        When the start point fails, or the objective returns something that is not a number.
    JournalError
        When ``journal`` is not a journal, is damaged, is in use, or belongs to another problem.
    """
    options = minimize_options(
        objective, start, bounds, names, budget, point_tolerance=point_tolerance,
        value_tolerance=value_tolerance, time_limit=time_limit, check=check, escapes=escapes,
        noise=noise, replicates=replicates,
    )
    if executor is not None and not isinstance(executor, cf.Executor):
        raise ProblemError(f"executor must be a concurrent.futures.Executor, got {executor!r}")
    with session(objective, options, journal, executor=executor, progress=progress) as (
        driver, book
    ):
        settled, settings, noted = driver.run(minimization(options))
        outcome = settled.outcome
        book.finish(outcome.stop, outcome.reason, replayed=driver.replayed)
        found = solution(
            options.space, driver.log, outcome, settings.point_tolerance,
            noise=settings.noise or None,
        )
        found = settled_solution(found, settled, (*noted, *book.notes))
        return with_replicates(found, driver.log.evaluations, options.replicates)


def minimization(
    options: Options,
) -> Generator[Request, Any, tuple[Settled, Settings, tuple[str, ...]]]:
    """The whole of `minimize` as one generator for the driver.

    The noise estimate (when asked), the search, the curvature check and its escapes, joined
    with ``yield from``; returns what the check settled, the settings the search used (their
    value tolerance floored by the noise) and the notes for the user.
    """
    space = options.space
    level, noted = yield from planned_level(space, options.noise, options.replicates)
    settings = planned(options.settings, options.noise, level)
    outcome = yield from powell(space, settings)
    level = yield from pooled_level(options.noise, options.replicates, level)
    if outcome.noise is not None and level is None:  # noticed by the search: check above it too
        level, settings = outcome.noise, planned(settings, options.noise, outcome.noise)
        noted = (*noted, noticed(level))
    settled = yield from settle(
        space, settings, outcome, check=options.check, escapes=options.escapes, noise=level,
        budget=options.budget,
    )
    return settled, settings, noted


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
                values = yield Batch(points=ts[:, None].copy(), purpose=Purpose.LINE)
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


def estimate_noise(
    objective: Objective,
    point: object,
    *,
    bounds: object = None,
    names: Sequence[str] | None = None,
    step: float = 1e-6,
    points: int = 9,
    seed: int | np.random.Generator | None = 0,
    retries: int = 2,
) -> NoiseLevel:
    """Return the level of computational noise of ``objective`` near ``point``.

    Evaluates the objective at ``points`` equally spaced points along a random direction through
    ``point`` and reads the noise off the difference table (Moré & Wild 2011; see
    `directional.method.noise`).  ``step`` is the spacing in scaled coordinates: a fraction of
    each parameter's size (its bound width, else its magnitude, else 1).  A failure signal is
    reported in ``status`` rather than raised: the cure (another step) is tried ``retries`` times
    first.

    >>> import numpy as np
    >>> noise = estimate_noise(lambda x: float(np.sum(x**2)) + 1.0, [0.5, 0.5])
    >>> noise.status, noise.level < 1e-14
    ('detected', True)

    Raises
    ------
    ProblemError
        For a bad point, bounds, step, number of points or retries.
    ObjectiveError
        When the objective returns something that is not a number, or fails at ``point``.

    References
    ----------
    .. [1] J. J. Moré and S. M. Wild, "Estimating computational noise", *SIAM Journal on
       Scientific Computing* 33(3) (2011) 1292-1314.
    """
    if not callable(objective):
        raise ProblemError(f"objective must be callable, got {objective!r}")
    check_options(step, points, retries)
    space = build_space(point, bounds, names)
    driver = Driver(objective=objective, budget=(retries + 1) * points)
    result: NoiseLevel = driver.run(estimate(space, np.zeros(space.size), step=step, points=points,
                                             seed=seed, retries=retries))
    if result.status == FAILED and all(e.status != Status.OK for e in driver.log.evaluations):
        raise ObjectiveError(
            f"the objective failed at every point near {space.start.tolist()!r}: "
            f"{driver.log.evaluations[-1].detail}"
        )
    return result


