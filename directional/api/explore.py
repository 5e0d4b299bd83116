"""`explore`: many searches from a space-filling design of starts, and the distinct minima found.

Calibration objectives often have several local minima; which one a search reaches depends on
where it starts.  `explore` starts one direction-set search (`search.powell`) from each point of
a scrambled Sobol design in the bounds (Sobol 1967; scrambling by Owen 1998, as
`scipy.stats.qmc` does it), plus the user's start when given, runs them all at once on an
executor (`run.driver.Driver`), groups the end points into distinct minima and checks each one.

Two end points are the same minimum when their distance in scaled coordinates (each parameter,
or its logarithm when log-scaled, divided by the width of its bounds) is below ``same_point``
and their values agree within ``same_value * max(1, |f1|, |f2|)``, or within six times the
noise level when the objective is noisy (the difference of two noisy values has a standard
deviation of sqrt(2) times the noise; common practice, no source).

References
----------
.. [1] I. M. Sobol', "On the distribution of points in a cube and the approximate evaluation of
   integrals", *USSR Computational Mathematics and Mathematical Physics* 7 (1967) 86-112.
.. [2] A. B. Owen, "Scrambling Sobol' and Niederreiter-Xing points", *Journal of Complexity* 14
   (1998) 466-489.
.. [3] D. M. Himmelblau, *Applied Nonlinear Programming*, McGraw-Hill, 1972 (the four-minimum
   test function used in the tests).
"""

from __future__ import annotations

import concurrent.futures as cf
import dataclasses
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.stats import qmc

from directional.api.options import (
    Options,
    budget_option,
    replicate_identity,
    search_settings,
    time_limit_option,
)
from directional.api.session import (
    active,
    runs_by_point,
    search_directions,
    session,
    with_replicates,
)
from directional.errors import ObjectiveError, ProblemError
from directional.method.curvature import Settled, check_kind, escape_count, settle, settled_solution
from directional.method.noise import noise_option, planned
from directional.method.replicates import planned_level, pooled, pooled_level, replicate_count
from directional.method.search import Settings, powell
from directional.method.space import Space, build_space, space_from_parameters
from directional.parameters import Parameter
from directional.records import Status, Stop, Verdict
from directional.run.driver import Driver, Evaluation, Objective, Observer
from directional.run.executors import check_picklable
from directional.run.identity import run_identity
from directional.run.workers import process_pool
from directional.solution import CAUTION, Solution, describe_break

SAME_POINT = 1e-3  # scaled distance below which two end points are one minimum
SAME_VALUE = 1e-6  # relative agreement of their values
NOISE_SPREAD = 6.0  # values within this many noise levels agree (module docstring)


# ------------------------------------------------------------------------------------- design


def design(space: Space, starts: int, seed: object = 0, *, include_start: bool = False) -> np.ndarray:
    """Return ``starts`` start points in scaled coordinates, filling the bounds.

    A scrambled Sobol sequence (Sobol 1967, Owen 1998) in the box of the scaled coordinates, so
    that log-scaled parameters are spread evenly in their logarithm.  With ``include_start`` the
    first point is the space's own start (``u = 0``) and the sequence fills the rest.  The same
    ``seed`` (None, an int or a `numpy.random.Generator`) gives the same points, and a longer
    design begins with the points of a shorter one.

    >>> from directional.method.space import build_space
    >>> space = build_space([0.5, 0.5], [(0, 1), (0, 1)])
    >>> design(space, 4, seed=0).shape
    (4, 2)

    Raises
    ------
    ProblemError
        For ``starts`` below 1, or a parameter without finite bounds (naming it).
    """
    if isinstance(starts, bool) or not isinstance(starts, int | np.integer) or starts < 1:
        raise ProblemError(f"starts must be a whole number of at least 1, got {starts!r}")
    for name, lo, hi in zip(space.names, space.lower_u, space.upper_u):
        if not (math.isfinite(lo) and math.isfinite(hi)):
            raise ProblemError(
                f"parameter {name!r}: exploring needs finite lower and upper bounds"
            )
    drawn = int(starts) - (1 if include_start else 0)
    points = np.zeros((0, space.size))
    if drawn > 0:
        unit = _sobol(space.size, drawn, seed)
        points = space.lower_u + unit * (space.upper_u - space.lower_u)
    if include_start:
        points = np.vstack([np.zeros((1, space.size)), points])
    return points


def _sobol(n: int, count: int, seed: object) -> np.ndarray:
    """The first ``count`` points of a scrambled Sobol sequence in [0, 1)^n."""
    try:
        rng = np.random.default_rng(seed)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        raise ProblemError(
            f"seed must be None, a whole number >= 0 or a numpy Generator, got {seed!r}"
        ) from None
    try:
        engine = qmc.Sobol(d=n, scramble=True, rng=rng)
    except TypeError:  # scipy before 1.15 calls it seed
        engine = qmc.Sobol(d=n, scramble=True, seed=rng)
    return engine.random_base2(max(0, math.ceil(math.log2(count))))[:count]


# ---------------------------------------------------------------------------------- clusters


def cluster(
    points: np.ndarray,
    values: np.ndarray,
    same_point: float = SAME_POINT,
    same_value: float = SAME_VALUE,
    noise: float = 0.0,
    rough: Sequence[bool] = (),
) -> tuple[list[int], list[int]]:
    """Group end points into distinct minima, best first.

    ``points`` are scaled (k, n), ``values`` their objective values (non-finite: a failed search,
    in no group).  Returns ``(leaders, label)``: the index of each group's best point, best group
    first, and for each point the number of its group (-1 for a failed search).  A point joins the
    first (best) group whose leader is within ``same_point`` (Euclidean, scaled) and whose value
    agrees within ``same_value * max(1, |f1|, |f2|)`` or ``6 * noise``.  Where either point is
    marked ``rough`` (its check found a kink or a jump there), nearness alone decides: beside a
    corner the value changes at the slope's rate, so two searches that stopped a tolerance apart
    on either side of it differ in value by far more than any relative agreement.

    >>> cluster(np.array([[0.0], [0.5], [1e-5]]), np.array([1.0, 0.0, 1.0]))
    ([1, 0], [1, 0, 1])
    """
    order = sorted(
        (i for i in range(len(values)) if math.isfinite(values[i])), key=lambda i: (values[i], i)
    )
    leaders: list[int] = []
    label = [-1] * len(values)
    for i in order:
        for g, j in enumerate(leaders):
            near = float(np.linalg.norm(points[i] - points[j])) < same_point
            scale = max(1.0, abs(values[i]), abs(values[j]))
            agree = abs(values[i] - values[j]) <= max(same_value * scale, NOISE_SPREAD * noise)
            if near and (agree or _rough(rough, i) or _rough(rough, j)):
                label[i] = g
                break
        else:
            label[i] = len(leaders)
            leaders.append(i)
    return leaders, label


def _rough(rough: Sequence[bool], i: int) -> bool:
    return i < len(rough) and bool(rough[i])


# --------------------------------------------------------------------------------- landscape


@dataclass(frozen=True, slots=True, kw_only=True)
class Landscape:
    """What many searches from many starts found: the distinct minima and who reached which.

    ``minima`` are best first, each a `Solution` (its ``history`` holds the evaluations of the
    searches that reached it); ``counts[i]`` starts reached ``minima[i]``; ``starts`` holds the
    start points (user coordinates, one row per search) and ``ends`` where each search ended;
    ``reached[j]`` is the index of the minimum search ``j`` reached, -1 when its start failed;
    ``evaluations`` counts every objective call of the run (repeats answered from the cache not
    counted), ``failures`` the failed ones.
    """

    minima: tuple[Solution, ...]
    counts: tuple[int, ...]
    starts: np.ndarray
    ends: np.ndarray
    reached: tuple[int, ...]
    evaluations: int
    failures: int
    names: tuple[str, ...]
    scales: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    stops: tuple[Stop, ...] = ()
    notes: tuple[str, ...] = ()
    history: tuple[Evaluation, ...] = field(default=(), repr=False)

    @property
    def best(self) -> Solution:
        """The best minimum found.

        Raises
        ------
        ValueError
            When every search failed at its start (no minimum).
        """
        if not self.minima:
            raise ValueError("no search got past its start: there is no minimum")
        return self.minima[0]

    def summary(self) -> str:
        """A plain-text table of the distinct minima, for people, ending with the caution."""
        return "\n".join([*_summary_lines(self), "", CAUTION])


def _summary_lines(land: Landscape) -> list[str]:
    k = len(land.starts)
    lines = [
        f"directional explore: {k} starts reached {len(land.minima)} distinct "
        f"minim{'um' if len(land.minima) == 1 else 'a'} with {land.evaluations} evaluations"
        + (f" ({land.failures} failed)" if land.failures else "")
    ]
    lost = sum(1 for r in land.reached if r < 0)
    if lost:
        lines.append(f"  {lost} start{'s' if lost > 1 else ''} failed at the first evaluation")
    unfinished = sum(
        1 for s, r in zip(land.stops, land.reached) if r >= 0 and s is not Stop.CONVERGED
    )
    if unfinished:
        lines.append(
            f"  {unfinished} search{'es' if unfinished > 1 else ''} stopped before converging "
            "(budget, time, interrupt or failures): its minimum may not be one"
        )
    widths = [max(12, len(n)) for n in land.names]
    head = "  ".join(f"{n:>{w}}" for n, w in zip(land.names, widths))
    lines += ["", f"  {'#':>3}  {'value':>14}  {'starts':>6}  {'verdict':<9}  {head}"]
    for i, (sol, count) in enumerate(zip(land.minima, land.counts)):
        row = "  ".join(f"{v:>{w}.8g}" for v, w in zip(sol.point, widths))
        lines.append(
            f"  {i + 1:>3}  {sol.value:>14.8g}  {count:>6}  {sol.verdict.value:<9}  {row}"
        )
    for note in land.notes:
        lines.append(f"  note: {note}")
    for i, sol in enumerate(land.minima):
        for note in sol.notes:
            lines.append(f"  #{i + 1}: {note}")
        if sol.curvature is not None and sol.verdict is Verdict.FLAT:
            for combination in getattr(sol.curvature, "undetermined", ()):
                lines.append(f"  #{i + 1}: not determined: {combination}")
        for piece in getattr(sol.curvature, "breaks", ()):
            lines.append(f"  #{i + 1}: not smooth: {describe_break(piece)}")
    return lines


# ----------------------------------------------------------------------------------- explore


def explore(
    objective: Objective,
    bounds: object,
    starts: int = 16,
    executor: cf.Executor | None = None,
    workers: int | None = None,
    seed: object = 0,
    *,
    start: object = None,
    names: Sequence[str] | None = None,
    include_start: bool | None = None,
    budget: int | None = None,
    total_budget: int | None = None,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    time_limit: float | None = None,
    journal: object = None,
    check: bool | str = True,
    escapes: int = 3,
    noise: float | str | None = None,
    same_point: float = SAME_POINT,
    same_value: float = SAME_VALUE,
    replicates: int = 1,
) -> Landscape:
    """Return the distinct minima that searches from ``starts`` start points reach.

    The starts fill the bounds (`design`); each runs the same search as `minimize`, all at once:
    with no ``executor`` and no ``workers`` one evaluation at a time in this process; with
    ``workers=W`` on a process pool of W processes (the objective must then be picklable: a
    function at the top level of a module); with an ``executor`` (any
    `concurrent.futures.Executor`, e.g. a Dask cluster's ``Client(address).get_executor()``) on
    that executor as it is, at most ``workers`` evaluations in flight (None: no limit).  The
    minima are the same whichever way the run is made (`run.driver`).  Each distinct minimum is then
    checked as `minimize` checks its point (`curvature.settle`: Hessian, verdict, escape from a
    saddle), its Hessian stencil evaluated as one batch on the executor.

    >>> import directional as dl
    >>> def two_wells(x):
    ...     return (x[0] ** 2 - 1.0) ** 2 + x[1] ** 2
    >>> land = dl.explore(two_wells, [(-2, 2), (-1, 1)], starts=4)
    >>> sorted((round(float(m.point[0]), 4), m.verdict.value) for m in land.minima)
    [(-1.0, 'minimum'), (1.0, 'minimum')]

    Parameters
    ----------
    objective
        Called with one float array of the parameters; returns a number (as for `minimize`).
    bounds
        One finite ``(lower, upper)`` pair per parameter, or a list of `Parameter` (their
        scales are honoured).
    starts
        How many searches, the user's start included when it is used (``include_start``).
    seed
        Makes the design reproducible (None, an int or a `numpy.random.Generator`; an int when
        a journal is kept).
    start, names, include_start
        A start point and names for plain ``bounds``.  ``include_start`` says whether the start
        (``start``, or the starts of the `Parameter` list) is the first of the starts; by
        default it is when one is given.
    budget, total_budget
        The most evaluations for each search, its check included (default 1000 (n + 1)), and
        for the whole run (default: no limit beyond the searches' own), journaled evaluations
        included.  Neither is part of the journal's identity: run again with a larger one to go
        on.
    journal
        A path: every evaluation is kept there as it completes; calling `explore` again with the
        same arguments and journal (or `resume`) replays it and goes on, nothing evaluated twice.
    check, escapes, noise
        As for `minimize`: how each distinct minimum is checked, how often a saddle is escaped,
        the objective's noise level (``"estimate"``: measured once at the centre of the bounds,
        or at the start).
    same_point, same_value
        When two end points are one minimum (module docstring).
    replicates
        As for `minimize`: each point run this many times, the searches given the mean; the
        runs of one point go to the executor at once.  The budgets count runs; the noise level
        is read off the replicates at the centre of the bounds (or the start) unless ``noise`` is
        a number, and each minimum's ``spread`` is that of its searches' points.

    Raises
    ------
    ProblemError
        For bad bounds, starts, workers, executor, budget or tolerances, before any evaluation.
    ObjectiveError
        When the objective fails at every start, or returns something that is not a number.
    JournalError
        When the journal belongs to another problem or is damaged.
    """
    return exploration(
        objective, bounds, starts=starts, executor=executor, workers=workers, seed=seed,
        start=start, names=names, include_start=include_start, budget=budget,
        total_budget=total_budget, point_tolerance=point_tolerance,
        value_tolerance=value_tolerance, time_limit=time_limit, journal=journal, check=check,
        escapes=escapes, noise=noise, same_point=same_point, same_value=same_value,
        replicates=replicates,
    )


def exploration(
    objective: Objective,
    bounds: object,
    *,
    observers: Sequence[Observer] = (),
    executor: object = None,
    workers: int | None = None,
    journal: object = None,
    **arguments: Any,
) -> Landscape:
    """`explore` with ``observers`` told of each evaluation (the command line's progress bar).

    ``arguments`` are the other keyword arguments of `explore`.

    Raises
    ------
    ProblemError, ObjectiveError, JournalError
        As `explore`.
    """
    if not callable(objective):
        raise ProblemError(f"objective must be callable, got {objective!r}")
    options = explore_options(
        bounds, executor=executor, workers=workers, journal=journal, **arguments
    )
    made = None
    if executor is None and workers is not None:
        check_picklable(objective)
        executor = made = process_pool(workers)
    elif isinstance(executor, cf.ProcessPoolExecutor):
        check_picklable(objective)
    try:
        with session(
            objective, options, journal, executor=executor, workers=workers, observers=observers
        ) as (driver, kept):
            land = _explore(options, driver)
            land = dataclasses.replace(land, notes=(*land.notes, *kept.notes))
            kept.finish(_overall(land.stops), "", replayed=driver.replayed)
    finally:
        if made is not None:
            made.shutdown(wait=True, cancel_futures=True)
    return land


def explore_options(
    bounds: object,
    starts: int = 16,
    seed: object = 0,
    *,
    start: object = None,
    names: Sequence[str] | None = None,
    include_start: bool | None = None,
    budget: int | None = None,
    total_budget: int | None = None,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    time_limit: float | None = None,
    check: bool | str = True,
    escapes: int = 3,
    noise: float | str | None = None,
    same_point: float = SAME_POINT,
    same_value: float = SAME_VALUE,
    executor: object = None,
    workers: int | None = None,
    journal: object = None,
    replicates: int = 1,
) -> Options:
    """The options of `explore`, validated before any evaluation, with the design of starts.

    Raises
    ------
    ProblemError
        Naming the first bad argument.
    """
    space, given = _space(bounds, start, names)
    include = given if include_start is None else bool(include_start)
    settings = search_settings(point_tolerance, value_tolerance)
    k = replicate_count(replicates)
    allowed = budget_option(budget, space.size, replicates=k)
    total = (
        None if total_budget is None
        else budget_option(total_budget, space.size, "total_budget", replicates=k)
    )
    kind, escapes, noise = check_kind(check), escape_count(escapes), noise_option(noise)
    time_limit = _options(executor, workers, time_limit, same_point, same_value)
    if journal is not None and (isinstance(seed, bool) or not isinstance(seed, int | np.integer)):
        raise ProblemError(f"seed must be a whole number when a journal is kept, got {seed!r}")
    scaled_starts = design(space, starts, seed, include_start=include)
    identity = run_identity(
        "explore",
        space.parameters,
        settings,
        starts=int(starts),
        seed=int(seed) if isinstance(seed, int | np.integer) else None,
        include_start=include,
        point_tolerance=settings.point_tolerance,
        value_tolerance=settings.value_tolerance,
        check=check,
        escapes=escapes,
        noise=noise,
        same_point=float(same_point),
        same_value=float(same_value),
        **replicate_identity(k),
    )
    return Options(
        kind="explore", space=space, settings=settings, budget=allowed, time_limit=time_limit,
        check=kind, escapes=escapes, noise=noise, identity=identity, starts=scaled_starts,
        total_budget=total, same_point=float(same_point), same_value=float(same_value),
        replicates=k,
    )


def _overall(stops: Sequence[Stop]) -> Stop:
    """How the run as a whole ended, for the journal: the most serious of the searches' stops."""
    return next(
        (s for s in (Stop.INTERRUPTED, Stop.BUDGET, Stop.STALLED) if s in stops), Stop.CONVERGED
    )


def _explore(options: Options, driver: Driver) -> Landscape:
    """The searches, then the check of each distinct minimum, then the landscape.

    Three stages on one driver (one cache, budget rule, log and journal): the noise estimate
    under search id k (after the searches' ids), the k searches at once, then the check of each
    distinct minimum under the id of the search that reached it (its budget goes on).
    """
    space = options.space
    scaled_starts = options.starts
    assert scaled_starts is not None
    k = len(scaled_starts)
    level, noted = driver.run(planned_level(space, options.noise, options.replicates), search=k)
    settings = planned(options.settings, options.noise, level)
    outcomes = driver.run_all(
        {j: powell(space, settings, start=u) for j, u in enumerate(scaled_starts)}
    )
    ends = np.array([outcomes[j].point for j in range(k)])
    values = np.array([outcomes[j].value for j in range(k)])
    level = _pooled_level(options, driver, k, level)
    noticed = [o.noise for o in outcomes.values() if o.noise is not None]  # by the searches
    spread = float(level) if level is not None else max(noticed, default=0.0)
    leaders, label = cluster(ends, values, options.same_point, options.same_value, spread)
    interrupted = any(o.stop is Stop.INTERRUPTED for o in outcomes.values())
    check = None if interrupted else options.check
    settled: dict[int, Settled] = {
        j: driver.run(
            settle(space, settings, outcomes[j], check=check, escapes=options.escapes,
                   noise=level if level is not None else outcomes[j].noise, budget=options.budget),
            search=j,
        )
        for j in leaders
    }
    # An escape moves a minimum, maybe onto another: group again by where each start ended up.
    final_u, final_f = ends.copy(), values.copy()
    for j in range(k):
        if label[j] >= 0:
            final = settled[leaders[label[j]]].outcome
            final_u[j], final_f[j] = final.point, final.value
    rough = [
        label[j] >= 0 and bool(getattr(settled[leaders[label[j]]].curvature, "breaks", ()))
        for j in range(k)
    ]
    groups, reached = cluster(final_u, final_f, options.same_point, options.same_value, spread, rough)
    evaluations = driver.log.evaluations
    if not groups and not interrupted and evaluations:
        last = evaluations[-1]
        if last.value == -math.inf:  # not a failure: the objective is unbounded below
            raise ObjectiveError(
                f"the objective returned -inf at {last.point.tolist()!r}, at a start: it is "
                "unbounded below there"
            )
        raise ObjectiveError(
            f"the objective failed at every one of the {k} starts; last error at "
            f"{last.point.tolist()!r}: {last.detail or last.status}"
        )
    minima = []
    for g, j in enumerate(groups):
        members = {i for i in range(k) if reached[i] == g}
        history = tuple(e for e in evaluations if e.search in members)
        found = _minimum(space, settings, settled[leaders[label[j]]], history)
        minima.append(with_replicates(found, history, options.replicates))
    found = pooled(runs_by_point(evaluations).values(), options.replicates)
    if options.replicates > 1 and found is not None:
        noted = (*noted, found.describe())
    return Landscape(
        minima=tuple(minima),
        counts=tuple(reached.count(g) for g in range(len(groups))),
        starts=space.to_user(scaled_starts),
        ends=space.to_user(ends),
        reached=tuple(reached),
        evaluations=len(evaluations),
        failures=sum(1 for e in evaluations if e.status != Status.OK),
        names=space.names,
        scales=tuple(p.scale for p in space.parameters),
        lower=space.lower.copy(),
        upper=space.upper.copy(),
        stops=tuple(outcomes[j].stop for j in range(k)),
        notes=noted,
        history=tuple(evaluations),
    )


def _pooled_level(options: Options, driver: Driver, k: int, level: float | None) -> float | None:
    """With replicates: the median over the searches of their pooled levels (`pooled_level`).

    Better determined than the one point's the searches planned with; it decides which ends
    are one minimum and steps the checks.  Asked of the driver (each search's own points), so a
    resumed run finds the same.
    """
    if options.replicates < 2:
        return level
    asked = {j: pooled_level(options.noise, options.replicates, None) for j in range(k)}
    levels = [v for v in driver.run_all(asked).values() if v is not None]
    return float(np.median(levels)) if levels else level


def _minimum(
    space: Space, settings: Settings, settled: Settled, history: tuple[Evaluation, ...]
) -> Solution:
    """One distinct minimum as a `Solution`, with the verdict and notes of its check."""
    outcome = settled.outcome
    point = space.to_user(outcome.point)
    solution = Solution(
        point=point,
        value=outcome.value,
        evaluations=len(history),
        cycles=outcome.cycles,
        stop=outcome.stop,
        verdict=Verdict.UNCHECKED,
        active=active(space, point, settings.point_tolerance),
        curvature=None,
        uncertainty=None,
        directions=search_directions(space, outcome.directions),
        names=space.names,
        units=tuple(p.unit for p in space.parameters),
        lower=space.lower.copy(),
        upper=space.upper.copy(),
        reason=outcome.reason,
        history=history,
        noise=settings.noise or outcome.noise,
    )
    return settled_solution(solution, settled)


def _space(bounds: object, start: object, names: Sequence[str] | None) -> tuple[Space, bool]:
    """The search space and whether its start is one of the starts."""
    if isinstance(bounds, Parameter) or (
        isinstance(bounds, Sequence)
        and len(bounds) > 0
        and all(isinstance(p, Parameter) for p in bounds)
    ):
        if start is not None or names is not None:
            raise ProblemError("give start and names inside each Parameter, not as arguments too")
        parameters = [bounds] if isinstance(bounds, Parameter) else list(bounds)
        return space_from_parameters(parameters), True
    if bounds is None:
        raise ProblemError("exploring needs bounds: one (lower, upper) pair per parameter")
    if start is not None:
        return build_space(start, bounds, names), True
    try:
        pairs = np.array(
            [[np.nan if v is None else v for v in row] for row in bounds], dtype=float  # type: ignore[union-attr]
        )
    except (TypeError, ValueError):
        raise ProblemError(
            f"bounds must be one (lower, upper) pair per parameter, got {bounds!r}"
        ) from None
    if pairs.ndim != 2 or pairs.shape[1] != 2 or pairs.shape[0] == 0:
        raise ProblemError(f"bounds must be one (lower, upper) pair per parameter, got {bounds!r}")
    labels = list(names) if names is not None else [f"x{i}" for i in range(len(pairs))]
    for name, (lo, hi) in zip(labels, pairs):
        if not (math.isfinite(lo) and math.isfinite(hi)):
            raise ProblemError(f"parameter {name!r}: exploring needs finite lower and upper bounds")
    centre = 0.5 * (pairs[:, 0] + pairs[:, 1])
    return build_space(centre, [tuple(p) for p in pairs], names), False


def _options(
    executor: object, workers: object, time_limit: object, same_point: object, same_value: object
) -> float | None:
    if executor is not None and not isinstance(executor, cf.Executor) and not hasattr(executor, "submit"):
        raise ProblemError(f"executor must be a concurrent.futures.Executor, got {executor!r}")
    if workers is not None and (
        isinstance(workers, bool) or not isinstance(workers, int | np.integer) or workers < 1
    ):
        raise ProblemError(f"workers must be a whole number of at least 1, got {workers!r}")
    time_limit = time_limit_option(time_limit)
    for key, value in (("same_point", same_point), ("same_value", same_value)):
        if isinstance(value, bool) or not isinstance(value, int | float) or not value >= 0:
            raise ProblemError(f"{key} must be a number of at least 0, got {value!r}")
    return time_limit  # type: ignore[return-value]
