"""`calibrate`: least squares on a residual vector, and how well each parameter is determined.

Theory of operation.  The objective is ``S(x) = sum r_i(x)**2`` of a residual vector (model minus
data, divided by the data's standard deviations when they are given).  Since every evaluation
returns the whole vector, the search works on the vector itself: Gauss–Newton steps in a trust
region (Moré 1978) on a Jacobian made once by forward differences and kept current by Broyden's
(1965) secant updates, a fresh one paid for only when the model proves poor, and the end decided
on a central-difference Jacobian at the point (`directional.method.gaussnewton`).  The point is
then checked by the Gauss–Newton matrix JᵀJ of one central-difference Jacobian of the residuals
(`directional.method.fitcheck`; the full numerical Hessian of `directional.method.curvature` only
where the residuals' curvature is not small against JᵀJ), and the same Jacobian gives the
linearized uncertainty (Bates & Watts 1988, sec. 2.3):

    covariance = s² (JᵀJ)⁻¹,   s² = S / (m - p),

standard errors from its diagonal, the correlation matrix, and 95 % intervals
``estimate ± t(0.975, m - p) * standard error`` (Student's t, `scipy.stats.t`).  Parameters on a
bound are left out (their errors are nan; the others' intervals hold with them fixed there) and
``p`` counts the free ones; a free parameter the data cannot separate from one on a bound
(`separation`) gets no interval.  A warning names parameters correlated beyond ``|r| > 0.95``,
combinations the data do not determine, and parameters not separable from one on a bound.

Every evaluation goes through the driver (counted, cached, journaled): see
`directional.method.leastsquares` for how the residual vectors travel beside the sums of squares.

References
----------
.. [1] J. J. Moré, "The Levenberg–Marquardt algorithm: implementation and theory",
   in *Numerical Analysis* (proceedings of the Dundee biennial conference, 1977), Springer,
   Berlin, 1978, 105-116.
.. [2] C. G. Broyden, "A class of methods for solving nonlinear simultaneous equations",
   *Mathematics of Computation* 19 (1965) 577-593.
.. [3] D. M. Bates and D. G. Watts, *Nonlinear Regression Analysis and Its Applications*, Wiley,
   1988, sec. 2.3.
"""

from __future__ import annotations

import concurrent.futures as cf
import dataclasses
import math
import warnings
from collections.abc import Generator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import stats

from directional.api.options import Options, calibrate_options
from directional.api.session import session, solution, with_replicates
from directional.errors import ProblemError
from directional.method.curvature import (
    Restart,
    Settled,
    combination,
    free_estimate,
    free_record,
    labels,
    record,
    settle,
    settled_solution,
)
from directional.method.fitcheck import GAUSS_NEWTON, FitCheck, check_fit
from directional.method.gaussnewton import gauss_newton, residual_level, value_noise
from directional.method.leastsquares import (
    Polished,
    Residuals,
    SumOfSquares,
)
from directional.method.noise import noticed, planned
from directional.method.replicates import planned_level, pooled_level
from directional.method.search import Settings, powell
from directional.method.space import Space
from directional.records import SPENT, Batch, Check, Halt, Outcome, Purpose, Request, Stop, Verdict
from directional.solution import Solution

EPSILON = float(np.finfo(float).eps)
STRONG = 0.95  # correlations beyond this are named in a warning
CONFOUNDED = 10.0  # freeing a bound parameter would multiply a standard error by this: not separable
UNDETERMINED = 1e-8  # relative singular value of the column-scaled Jacobian taken as zero
NEAR = 100.0  # point tolerances: the direction-set search converged to the Gauss-Newton point
RESTARTS = 3  # searches again from a lower point the check found, at most
LEVEL = 0.95  # coverage of the intervals
GLOBAL_SHARE = 40  # evaluations per parameter for the direction-set search where Gauss-Newton stalls


@dataclass(frozen=True, slots=True, kw_only=True)
class Uncertainty:
    """How well the calibrated parameters are determined (linearized, Bates & Watts 1988).

    Arrays run over all parameters in order (``names``); a parameter on a bound has nan errors
    and intervals.  ``intervals`` is (p, 2): lower and upper ends at ``level`` (95 %).
    ``residual_variance`` is ``s² = S / (m - p)`` with ``p`` the free parameters.
    ``undetermined`` names the parameter combinations the data do not determine; ``rough`` the
    parameters where the curvature check found the misfit not smooth (a kink or a jump): a
    linearization says nothing there, so their errors and intervals are nan.  ``fixed`` names the
    parameters on a bound: the errors and intervals of the others hold with them fixed there.
    ``confounded`` lists ``(name, bound name, growth)`` for a free parameter the data cannot
    separate from one on a bound: freed, the bound one would multiply its standard error by
    ``growth`` (at least `CONFOUNDED`, inf when their columns are dependent); its error and
    interval are nan rather than a tight number that holds only with the other one fixed.
    """

    names: tuple[str, ...]
    estimates: np.ndarray
    standard_errors: np.ndarray
    covariance: np.ndarray
    correlation: np.ndarray
    intervals: np.ndarray
    degrees_of_freedom: int
    residual_variance: float
    observations: int
    level: float = LEVEL
    undetermined: tuple[str, ...] = ()
    rough: tuple[str, ...] = ()  # not smooth there (curvature check): no error, no interval
    jacobian: str = ""  # which Jacobian the standard errors come from
    fixed: tuple[str, ...] = ()  # on a bound: the other intervals hold with these fixed there
    confounded: tuple[tuple[str, str, float], ...] = ()  # (free, on a bound, error growth)

    def strongest(self, count: int = 3) -> list[tuple[str, str, float]]:
        """The ``count`` largest correlations in absolute value, as (name, name, r)."""
        pairs = []
        p = len(self.names)
        for i in range(p):
            for j in range(i + 1, p):
                r = self.correlation[i, j]
                if math.isfinite(r):
                    pairs.append((self.names[i], self.names[j], float(r)))
        pairs.sort(key=lambda item: -abs(item[2]))
        return pairs[:count]


# ----------------------------------------------------------------------------- uncertainty


def uncertainty(
    space: Space, x: np.ndarray, jacobian_u: np.ndarray, value: float, free: np.ndarray
) -> Uncertainty:
    """Standard errors, correlations and intervals from the Jacobian (scaled coordinates) at x.

    The Jacobian is moved to the user's coordinates (``dx/du = s`` for a linear parameter,
    ``s x`` for a log-scaled one), and ``s² (JᵀJ)⁻¹`` is computed from the singular value
    decomposition of J with its columns scaled to unit length, so that no cross product is
    formed.  Singular values below ``1e-8`` of the largest mark combinations the data do not
    determine; parameters taking part in them get infinite errors.
    """
    n = space.size
    m = jacobian_u.shape[0]
    derivative = np.where(space.log, space.scale * x, space.scale)
    jacobian = (jacobian_u / derivative)[:, free]
    p = int(free.sum())
    dof = m - p
    variance = value / dof if dof > 0 else math.nan
    norms = np.sqrt(np.sum(jacobian**2, axis=0))
    norms = np.where(norms > 0.0, norms, 1.0)
    _, singular, vt = np.linalg.svd(jacobian / norms, full_matrices=False)
    null = singular <= UNDETERMINED * singular[0] if singular.size else np.zeros(0, bool)
    inverse = np.where(null, 0.0, 1.0 / np.where(null, 1.0, singular) ** 2)
    cov_free = variance * (vt.T * inverse) @ vt / np.outer(norms, norms)
    involved = np.zeros(p, dtype=bool)
    undetermined = []
    names = labels(space, free)
    for k in np.flatnonzero(null):
        vector = vt[k] / norms
        involved |= np.abs(vector) >= 0.1 * np.max(np.abs(vector))
        undetermined.append(combination(vector, names))
    covariance = np.full((n, n), np.nan)
    covariance[np.ix_(free, free)] = cov_free
    se_free = np.sqrt(np.diag(cov_free))
    se_free[involved] = np.inf
    errors = np.full(n, np.nan)
    errors[free] = se_free
    known = np.isfinite(errors) & (errors > 0.0)  # a perfect fit (S = 0): no correlation to show
    correlation = np.full((n, n), np.nan)
    correlation[np.ix_(known, known)] = covariance[np.ix_(known, known)] / np.outer(
        errors[known], errors[known]
    )
    np.fill_diagonal(correlation, np.where(known, 1.0, np.nan))
    t = float(stats.t.ppf(0.5 + LEVEL / 2.0, dof)) if dof > 0 else math.nan
    intervals = np.column_stack([x - t * errors, x + t * errors])
    return Uncertainty(
        names=space.names, estimates=x.copy(), standard_errors=errors, covariance=covariance,
        correlation=correlation, intervals=intervals, degrees_of_freedom=dof,
        residual_variance=variance, observations=m, undetermined=tuple(undetermined),
    )


def separation(
    space: Space, x: np.ndarray, jacobian_u: np.ndarray, bound_u: np.ndarray | None,
    free: np.ndarray,
) -> tuple[tuple[str, str, float], ...]:
    """Free parameters the data cannot separate from one on a bound, with the error growth.

    For each parameter ``b`` on a bound (its one-sided column in ``bound_u``, scaled coordinates)
    and each free ``j``: the factor by which freeing ``b`` would multiply the standard error of
    ``j``, ``sqrt([(J₊ᵀJ₊)⁻¹]_jj / [(JᵀJ)⁻¹]_jj)`` with ``J₊`` the free columns and ``b``'s (the
    variance inflation of a regressor by one more, e.g. Draper & Smith 1998, "Applied Regression
    Analysis", sec. 16.4, from memory).  It is large when ``j``'s column lies nearly in the span
    of ``b``'s and the others': then the data tell ``j`` from ``b`` only through the bound.
    Returned where it reaches `CONFOUNDED` (inf where ``J₊`` is singular).
    """
    if bound_u is None or free.all() or not free.any():
        return ()
    derivative = np.where(space.log, space.scale * x, space.scale)
    columns = np.flatnonzero(free)
    base = jacobian_u[:, columns] / derivative[columns]
    inner = _inverse_diagonal(base)
    found = []
    for b in np.flatnonzero(~free):
        if not np.any(bound_u[:, b]):
            continue
        widened = np.column_stack([base, bound_u[:, b] / derivative[b]])
        outer = _inverse_diagonal(widened)[:-1]
        with np.errstate(divide="ignore", invalid="ignore"):
            growth = np.sqrt(outer / inner)
        for j, g in zip(columns, growth):
            if not g < CONFOUNDED:
                found.append((space.names[j], space.names[b], float(g)))
    return tuple(found)


def _inverse_diagonal(jacobian: np.ndarray) -> np.ndarray:
    """The diagonal of (JᵀJ)⁻¹ from the SVD of the column-scaled J (inf where J is singular)."""
    norms = np.sqrt(np.sum(jacobian**2, axis=0))
    norms = np.where(norms > 0.0, norms, 1.0)
    _, singular, vt = np.linalg.svd(jacobian / norms, full_matrices=False)
    if singular.size == 0 or singular[-1] <= UNDETERMINED * singular[0]:
        return np.full(jacobian.shape[1], np.inf)
    return np.sum((vt.T / singular) ** 2, axis=1) / norms**2


def _confounded(result: Uncertainty, found: tuple[tuple[str, str, float], ...]) -> Uncertainty:
    """No standard error or interval for a parameter not separable from one on a bound."""
    if not found:
        return result
    names = {j for j, _, _ in found}
    keep = np.array([name not in names for name in result.names])
    return dataclasses.replace(
        result, confounded=found, standard_errors=np.where(keep, result.standard_errors, np.nan),
        intervals=np.where(keep[:, None], result.intervals, np.nan),
        correlation=np.where(np.outer(keep, keep), result.correlation, np.nan),
    )


def _source(fit: FitCheck, free: int) -> str:
    """Which Jacobian the standard errors come from, for the summary."""
    steps = fit.steps if fit.steps is not None and fit.steps.size else np.zeros(1)
    size = f"{steps.min():.2g}" if steps.min() == steps.max() else f"{steps.min():.2g} to {steps.max():.2g}"
    again = f", the best of {fit.stencils} stencils" if fit.stencils > 1 else ""
    return (f"the check's central-difference Jacobian ({2 * free} points, steps {size} of the "
            f"problem's size{again})")


def _rough(result: Uncertainty, curvature: object) -> Uncertainty:
    """No standard error or interval for a parameter where the misfit is not smooth."""
    rough = {name for b in getattr(curvature, "breaks", ()) for name in b.parameters}
    if not rough:
        return result
    keep = np.array([name not in rough for name in result.names])
    errors = np.where(keep, result.standard_errors, np.nan)
    intervals = np.where(keep[:, None], result.intervals, np.nan)
    correlation = np.where(np.outer(keep, keep), result.correlation, np.nan)
    return dataclasses.replace(
        result, standard_errors=errors, intervals=intervals, correlation=correlation,
        rough=tuple(name for name in result.names if name in rough),
    )


def _warnings(result: Uncertainty) -> list[str]:
    messages = []
    if result.rough:
        messages.append(
            "no linearized interval for " + ", ".join(result.rough) + ": the misfit is not "
            "smooth there (a kink or a jump, see the curvature check), so s²(JᵀJ)⁻¹ does not apply"
        )
    for name, bound, growth in result.confounded:
        how = "their columns are dependent" if math.isinf(growth) else (
            f"freed, {bound} would multiply its standard error by {growth:.3g}")
        messages.append(
            f"the data cannot separate {name} from {bound}, which is on a bound ({how}): no "
            f"interval for {name}, since one would hold only with {bound} fixed there"
        )
    if result.undetermined:
        messages.append(
            "the data do not determine " + "; ".join(result.undetermined)
            + ": their standard errors are infinite"
        )
    strong = [(a, b, r) for a, b, r in result.strongest(len(result.names) ** 2) if abs(r) > STRONG]
    if strong:
        pairs = ", ".join(f"{a} and {b} (r = {r:+.4f})" for a, b, r in strong[:4])
        more = f" and {len(strong) - 4} more pairs" if len(strong) > 4 else ""
        messages.append(
            f"strongly correlated parameters (|r| > {STRONG}): {pairs}{more}; each is poorly "
            "determined alone"
        )
    if result.degrees_of_freedom <= 0:
        messages.append(
            f"{result.observations} residuals for {len(result.names)} parameters leave no degrees "
            "of freedom: no uncertainty can be given"
        )
    return messages


# ----------------------------------------------------------------------------- the check


def checked(
    space: Space,
    settings: Settings,
    outcome: Outcome,
    squares: SumOfSquares,
    *,
    check: Check | None,
    escapes: int,
    noise: float | None,
    budget: int,
    restart: Restart,
) -> Generator[Request, Any, tuple[Settled, np.ndarray, FitCheck | None]]:
    """The verdict of a fit and the Jacobian for its uncertainty, from one stencil where it can.

    The check by JᵀJ (`directional.method.fitcheck`): one central-difference Jacobian at the
    point, at most 2 k + 1 evaluations for k free parameters (and one per parameter on a bound;
    points the Levenberg–Marquardt finish already evaluated come from the driver's cache), gives
    the verdict and the standard errors.  Where the residuals' curvature is not negligible against
    JᵀJ (large residuals), or the check could not finish, the full numerical Hessian decides
    (`directional.method.curvature.settle`, with its escapes from saddles), and a point it moves
    to is measured again for the uncertainty.  With ``check`` None, or a search that did not
    converge, the verdict is UNCHECKED but the Jacobian is still measured.  Where a point of the
    check's own stencil is lower than the search's by more than the value tolerance (or four
    times the noise), the search did not converge there: it is restarted from that point
    (``restart``, at most `RESTARTS` times, as `curvature.settle` does after an escape), and
    after that the verdict is UNCHECKED with a note that says why.  Returns what was settled,
    the mask of free parameters and the check (None when the stencil could not be had).
    """
    def free_at(u: np.ndarray) -> np.ndarray:
        return ~space.on_bound(space.to_user(u), 10.0 * settings.point_tolerance)

    notes: list[str] = []
    restarts = 0
    while True:
        if check is None or outcome.stop is not Stop.CONVERGED:
            settled = yield from settle(space, settings, outcome, check=check, escapes=escapes,
                                        noise=noise, budget=budget)  # no evaluation: says why
            free = free_at(outcome.point)
            fit = yield from check_fit(space, squares, outcome.point, outcome.value, free,
                                       noise=noise)
            return _noted(settled, notes), free, fit
        before = yield SPENT
        free = free_at(outcome.point)
        fit, low, lowest = yield from watched(
            check_fit(space, squares, outcome.point, outcome.value, free, noise=noise))
        # a point of the check's own stencil far below the search's (more than the tolerance or
        # the noise allows): the search did not converge there, whatever JᵀJ says (where the
        # Hessian decides, `settle` escapes from saddles itself)
        floor = max(settings.value_tolerance * max(1.0, abs(outcome.value)),
                    4.0 * EPSILON * abs(outcome.value) if noise is None else 4.0 * float(noise))
        decides = fit.verdict is not Verdict.UNCHECKED and not fit.large  # JᵀJ, not the Hessian
        if decides and low is not None and lowest < outcome.value - floor:
            where = _described(space, low)
            if restarts < RESTARTS:
                restarts += 1
                notes.append(f"restart {restarts}: an evaluation of the check at {where} came out "
                             f"lower by {outcome.value - lowest:.2g} than the search's "
                             f"{outcome.value:.6g}; the search went on from there")
                cycles = outcome.cycles
                outcome = yield from restart(space.to_scaled(low))
                outcome = dataclasses.replace(outcome, cycles=cycles + outcome.cycles)
                continue
            notes.append(f"not a minimum: after {restarts} restarts an evaluation of the check "
                         f"at {where} still came out lower by {outcome.value - lowest:.2g}")
            spent = (yield SPENT) - before
            settled = _fit_settled(space, outcome, fit, free, spent)
            settled = dataclasses.replace(settled, verdict=Verdict.UNCHECKED)
            return _noted(settled, notes), free, (fit if fit.jacobian is not None else None)
        break
    if fit.verdict is not Verdict.UNCHECKED and not fit.large:
        spent = (yield SPENT) - before
        return _noted(_fit_settled(space, outcome, fit, free, spent), notes), free, fit
    settled = yield from settle(space, settings, outcome, check=check, escapes=escapes,
                                noise=noise, restart=restart, budget=budget)
    why = (f"the residuals' curvature is not small against JᵀJ (|q| up to {fit.ratio:.2g}): the "
           "full Hessian decides" if fit.verdict is not Verdict.UNCHECKED else fit.note)
    if why:
        settled = dataclasses.replace(settled, notes=(why, *settled.notes))
    if not np.array_equal(settled.outcome.point, outcome.point):
        free = free_at(settled.outcome.point)
        fit = yield from check_fit(space, squares, settled.outcome.point, settled.outcome.value,
                                   free, noise=noise)
    return _noted(settled, notes), free, (fit if fit.jacobian is not None else None)


def _noted(settled: Settled, notes: list[str]) -> Settled:
    """``settled`` with the restarts' notes first."""
    return dataclasses.replace(settled, notes=(*notes, *settled.notes)) if notes else settled


def _described(space: Space, x: np.ndarray) -> str:
    return "(" + ", ".join(f"{n}={v:.6g}" for n, v in zip(space.names, x)) + ")"


def watched(
    search: Generator[Request, Any, Any]
) -> Generator[Request, Any, tuple[Any, np.ndarray | None, float]]:
    """``search`` passed through, with the lowest finite value of its batches' points: returns
    its result, that point (user coordinates; None when no point had a finite value) and value."""
    low: np.ndarray | None = None
    lowest = math.inf
    try:
        request = next(search)
    except StopIteration as done:
        return done.value, low, lowest
    while True:
        try:
            answer = yield request
        except Halt as halt:
            try:
                request = search.throw(halt)
            except StopIteration as done:
                return done.value, low, lowest
            continue
        if isinstance(request, Batch):
            values = np.asarray(answer, dtype=float)
            finite = np.isfinite(values)
            if finite.any():
                i = int(np.argmin(np.where(finite, values, np.inf)))
                if values[i] < lowest:
                    low, lowest = np.array(request.points[i], dtype=float), float(values[i])
        try:
            request = search.send(answer)
        except StopIteration as done:
            return done.value, low, lowest


def _fit_settled(
    space: Space, outcome: Outcome, fit: FitCheck, free: np.ndarray, spent: int
) -> Settled:
    """The check by JᵀJ as a `Settled`: the Gauss–Newton matrix 2 JᵀJ as the curvature record."""
    names = labels(space, free)
    scale = space.scale[free]
    undetermined = () if fit.undetermined is None else tuple(
        combination(scale * d, names) for d in fit.undetermined.T
    )
    note = fit.note
    if fit.verdict is Verdict.NOISY:  # hidden by the noise, not shown to be undetermined
        note, undetermined = f"{note}; hidden: " + "; ".join(undetermined), ()
    curvature = record(
        fit.gauss_newton, fit.error, scale, GAUSS_NEWTON, names=names, margin=fit.margin,
        undetermined=undetermined, evaluations=spent,
        free=free_record(space, free_estimate(space, outcome)),
    )
    return Settled(outcome=outcome, verdict=fit.verdict, curvature=curvature,
                   notes=(note,) if note else (), escapes=0,
                   point=space.to_user(outcome.point))


# ----------------------------------------------------------------------------- calibrate


def calibrate(
    residuals: Residuals,
    start: object,
    bounds: object = None,
    names: Sequence[str] | None = None,
    budget: int | None = None,
    *,
    sigma: object = None,
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
    """Return the least-squares fit of a residual vector, with the uncertainty of its parameters.

    Minimizes ``S(x) = sum(r(x)**2)``, ``r`` = model minus data (divided by ``sigma`` when given),
    by Gauss–Newton steps on the residual vector in a trust region; then checks the point
    (`directional.method.curvature`) and computes ``sol.uncertainty`` (`Uncertainty`: standard errors,
    correlations, 95 % intervals) from s²(JᵀJ)⁻¹ (Bates & Watts 1988).  Warns when parameters are
    correlated beyond 0.95 or not determined.

    >>> import numpy as np, directional as dl
    >>> t = np.array([0.0, 1.0, 2.0, 3.0])                      # invented demo data
    >>> y = np.array([2.0, 1.2, 0.75, 0.45])
    >>> sol = dl.calibrate(lambda k: k[0] * np.exp(-k[1] * t) - y, [1.0, 1.0], names=["a", "k"])
    >>> {name: round(v, 3) for name, v in sol.named.items()}, sol.uncertainty.degrees_of_freedom
    ({'a': 1.996, 'k': 0.497}, 2)

    Parameters
    ----------
    residuals
        Called with one float array of the parameters; returns a flat array of m numbers.
    sigma
        None, one positive standard deviation for every residual, or m of them (one per
        residual): the residuals are divided by them.  The covariance is still scaled by
        s² = S / (m - p), which is near 1 when they are right.  A residual vector whose length is
        not the run's (sigma's, or else the start's) is a failed evaluation with that reason,
        stepped around like any other failure.
    replicates
        Run each point this many times (a stochastic model); the search sees the sum of squares
        of the mean residual vector of the runs that succeeded, and the journal keeps each run's
        vector (`directional.method.leastsquares`).  Otherwise as for `directional.minimize`; the
        noise level from the replicates is that of one run's sum of squares divided by sqrt(k).

    The other arguments are those of `directional.minimize`; ``budget`` counts every evaluation
    (search, check and Jacobian).  The verdict comes from JᵀJ of one
    central-difference Jacobian, which also gives the standard errors (`checked`); ``check``
    (True, "quick" or "extrapolated") chooses the numerical Hessian used instead where the
    residuals' curvature is not small against JᵀJ, and False leaves the verdict UNCHECKED (the
    Jacobian is still measured for the uncertainty).  ``executor`` evaluates the points of a
    batch in parallel; the residual vectors must come back to this process, so it must share
    its memory: a thread pool (for a program, each evaluation is its own process anyway;
    `directional.run.ordered.InOrder` keeps the journal in the serial order).

    Raises
    ------
    ProblemError
        For a bad start, bounds, names, budget, tolerance, sigma, check, escapes, noise or
        replicates.
    ObjectiveError
        When the start fails, or the residuals are not a flat array of numbers.
    """
    options = calibrate_options(
        residuals, start, bounds, names, budget, sigma=sigma, point_tolerance=point_tolerance,
        value_tolerance=value_tolerance, time_limit=time_limit, check=check, escapes=escapes,
        noise=noise, replicates=replicates,
    )
    if executor is not None and isinstance(getattr(executor, "_inner", executor),
                                           cf.ProcessPoolExecutor):
        raise ProblemError(
            "calibrate needs each residual vector back in this process: give a thread pool as "
            "executor, not a process pool (many starts on processes: directional.api.explore)"
        )
    squares = SumOfSquares(residuals, options.sigma, options.replicates)
    space = options.space
    combine = squares.combine if options.replicates > 1 else None
    with session(
        squares, options, journal, executor=executor, progress=progress, combine=combine
    ) as (driver, book):
        if options.replicates > 1:  # a resumed journal: nothing recomputed
            squares.runs.update(book.stored_runs())
            if squares.size is None and squares.runs:
                squares.size = next(iter(squares.runs.values()))[0][1].size
        squares.vectors.update(book.stored_vectors() if options.replicates == 1 else {})
        if squares.size is None and squares.vectors:
            squares.size = next(iter(squares.vectors.values())).size
        book.vectors = squares.journaled  # the journal keeps each evaluation's vector
        settled, settings, noted, free, fit = driver.run(calibration(options, squares))
        outcome = settled.outcome
        book.finish(outcome.stop, outcome.reason, replayed=driver.replayed)
        found = solution(space, driver.log, outcome, settings.point_tolerance)
        solution_ = settled_solution(found, settled, (*noted, *book.notes))
        solution_ = with_replicates(solution_, driver.log.evaluations, options.replicates)
    x = space.to_user(outcome.point)
    notes = list(outcome.notes) + list(solution_.notes)
    result = None
    if fit is None or fit.jacobian is None:
        notes.append("no uncertainty: an evaluation for the Jacobian failed or was not allowed")
    else:
        result = uncertainty(space, x, fit.jacobian, outcome.value, free)
        fixed = tuple(name for name, keep in zip(space.names, free) if not keep)
        result = dataclasses.replace(result, jacobian=_source(fit, int(free.sum())), fixed=fixed)
        result = _rough(result, settled.curvature)
        result = _confounded(
            result, separation(space, x, fit.jacobian, fit.bound_columns, free)
        )
        for message in _warnings(result):
            warnings.warn(message, stacklevel=2)
            notes.append(message)
    if squares.recomputed:
        notes.append(f"{squares.recomputed} residual vectors were recomputed (replayed journal)")
    return dataclasses.replace(
        solution_, point=x, value=outcome.value, uncertainty=result, notes=tuple(notes),
        noise=settings.noise or None,
    )


def calibration(
    options: Options, squares: SumOfSquares
) -> Generator[Request, Any, tuple[Settled, Settings, tuple[str, ...], np.ndarray, object]]:
    """The whole of `calibrate` as one generator for the driver.

    Noise estimate, the search on the residual vector (`_search`), curvature check and escapes,
    and the Jacobian for the uncertainty; returns what the check settled, the settings used, the
    notes, the mask of free parameters and the Jacobian (None when it could not be had).
    """
    space = options.space
    level, noted = yield from planned_level(space, options.noise, options.replicates)
    settings = planned(options.settings, options.noise, level)
    pooled = options.replicates > 1 and (options.noise is None or options.noise == "estimate")
    notice = options.noise is None and level is None
    outcome = yield from _search(space, settings, squares, None, noise=level, pooled=pooled,
                                 notice=notice)
    level = yield from pooled_level(options.noise, options.replicates, level)
    if outcome.noise is not None and level is None:  # noticed by the search: check above it too
        level, settings = outcome.noise, planned(settings, options.noise, outcome.noise)
        noted = (*noted, noticed(level))
    settled, free, fit = yield from checked(
        space, settings, outcome, squares, check=options.check, escapes=options.escapes,
        noise=level, budget=options.budget,
        restart=lambda u: _search(space, settings, squares, u, noise=level, pooled=pooled),
    )
    return settled, settings, noted, free, fit


def _search(
    space: Space,
    settings: Settings,
    squares: SumOfSquares,
    start: np.ndarray | None,
    *,
    noise: float | None,
    pooled: bool = False,
    notice: bool = False,
) -> Generator[Request, Any, Outcome]:
    """Gauss–Newton steps on the residual vector from ``start`` (scaled; None: the user's start),
    with the direction-set search as the globalization where they stall.

    ``pooled``: the residuals' noise is the replicates' pooled spread (`SumOfSquares.spread`),
    else it is derived from ``noise``, the level of S measured at the start.  ``notice`` (no
    noise stated): Gauss–Newton measures the residuals' noise where it would stall, and the
    outcome carries the noise of S it implies at the end (`Outcome.noise`) for the check.

    `gaussnewton.gauss_newton` keeps a secant Jacobian and stops on its model's own criteria.
    Where it stalls (an evaluation for its Jacobian failed) or ends on a plateau (the
    Gauss–Newton matrix JᵀJ singular: a direction the linear model cannot see, where a
    derivative-based step cannot go), the direction-set search (`search.powell`), whose line
    searches bracket over plateaus and step around failures, runs from the start of this search
    for at most `GLOBAL_SHARE` evaluations per parameter; if it finds a lower sum of squares,
    Gauss–Newton goes on from there.  If not, a stall stays STALLED (with its reason) unless the
    direction-set search converged to the same point (a corner of a nonsmooth misfit).  Damped
    Gauss–Newton steps do not jump, so they stay in the start's basin where a line search may
    leap across a pole of the model into another branch (seen on NIST's Hahn1 from its second
    start): that is why they come first.
    """
    u = np.zeros(space.size) if start is None else np.array(start, dtype=float)
    try:
        values = yield Batch(points=space.to_user(u)[None, :], purpose=Purpose.START)
    except Halt as halt:
        return Outcome(point=u, value=math.inf, stop=halt.stop, cycles=0,
                       directions=np.eye(space.size), curvatures=np.full(space.size, np.nan),
                       reason=halt.reason)
    value = float(values[0])
    empty = Outcome(point=u, value=value, stop=Stop.STALLED, cycles=0, directions=np.eye(space.size),
                    curvatures=np.full(space.size, np.nan), reason="the start point failed")
    if not math.isfinite(value):
        return empty
    # the residuals' own noise: from the replicates' vectors, else from the level of S measured
    # at the start (where S was ``value``); Gauss-Newton derives the noise of S at each point
    sigma = (squares.spread([space.to_user(u)]) if pooled else None) or residual_level(
        noise, value) or None
    polished = yield from gauss_newton(
        space, squares, u, value, point_tolerance=settings.point_tolerance,
        value_tolerance=settings.value_tolerance, noise=noise, residual_noise=sigma,
        notice=notice,
    )
    if polished.noise:
        sigma = polished.noise
    outcome = _replaced(dataclasses.replace(empty, stop=Stop.CONVERGED, reason=""), polished,
                        "Gauss-Newton")
    outcome = dataclasses.replace(outcome, cycles=polished.steps)
    if polished.noise:  # noticed: the noise of S at the end, from the residuals' own
        outcome = dataclasses.replace(outcome, noise=value_noise(
            polished.noise, outcome.value, polished_size(squares, space, outcome.point)))
    if not _stuck(polished):
        return outcome
    spent = yield SPENT
    found = yield from limited(powell(space, settings, u), spent + GLOBAL_SHARE * space.size)
    floor = max(settings.value_tolerance * abs(outcome.value), 0.0 if noise is None else noise)
    if found.stop is Stop.INTERRUPTED:
        return dataclasses.replace(outcome, stop=found.stop, reason=found.reason)
    if not found.value < outcome.value - floor:
        # neither method finds anything lower: the point is what the search has to offer, and
        # the check says what it is (a corner of a nonsmooth misfit stalls Gauss-Newton)
        note = ("the direction-set search from the start found nothing lower than the "
                "Gauss-Newton steps")
        near = np.abs(found.point - outcome.point) <= NEAR * settings.point_tolerance * np.maximum(
            1.0, np.abs(outcome.point))
        if polished.stop is Stop.STALLED and not (found.stop is Stop.CONVERGED and near.all()):
            # unless the direction-set search converged to the same point (a corner of a
            # nonsmooth misfit), the point passed none of the convergence tests: not converged
            return dataclasses.replace(outcome, stop=Stop.STALLED, reason=polished.reason,
                                       notes=(*outcome.notes, note))
        return dataclasses.replace(outcome, stop=Stop.CONVERGED, reason="",
                                   notes=(*outcome.notes, note))
    again = yield from gauss_newton(
        space, squares, found.point, found.value, point_tolerance=settings.point_tolerance,
        value_tolerance=settings.value_tolerance, noise=noise,
        residual_noise=sigma, notice=notice and sigma is None and polished.noise is None,
    )
    how = "the direction-set search from the start, then Gauss-Newton"
    moved = dataclasses.replace(found, stop=Stop.CONVERGED, reason="", notes=outcome.notes)
    final = dataclasses.replace(_replaced(moved, again, how),
                                cycles=outcome.cycles + found.cycles + again.steps)
    if again.noise:
        final = dataclasses.replace(final, noise=value_noise(
            again.noise, final.value, polished_size(squares, space, final.point)))
    return final


def polished_size(squares: SumOfSquares, space: Space, u: np.ndarray) -> int:
    """The number of residuals (that of the vector at ``u``, else the run's)."""
    r = squares.vector(space.to_user(u))
    return int(r.size) if r is not None else int(squares.size or 1)


def _stuck(polished: Polished) -> bool:
    """Whether Gauss–Newton stalled or ended where JᵀJ is singular (a plateau of the model)."""
    if polished.stop is Stop.STALLED:
        return True
    if polished.stop is not Stop.CONVERGED or polished.jacobian is None:
        return False
    norms = np.sqrt(np.sum(polished.jacobian**2, axis=0))
    if not np.all(np.isfinite(norms)):
        return True
    if np.any(norms == 0.0):
        return True
    singular = np.linalg.svd(polished.jacobian / norms, compute_uv=False)
    return bool(singular[-1] <= UNDETERMINED * singular[0])


def limited(
    search: Generator[Batch, np.ndarray, Outcome], limit: int
) -> Generator[Batch, np.ndarray, Outcome]:
    """``search`` with its batches limited to ``limit`` points of its search's budget."""
    try:
        batch = next(search)
    except StopIteration as done:
        return done.value
    while True:
        try:
            values = yield dataclasses.replace(batch, limit=limit)
        except Halt as halt:
            try:
                batch = search.throw(halt)
            except StopIteration as done:
                return done.value
            continue
        try:
            batch = search.send(values)
        except StopIteration as done:
            return done.value


def _replaced(outcome: Outcome, polished: Polished, what: str) -> Outcome:
    """The outcome moved to where the Gauss–Newton steps ended, if that is not higher.

    With the final Jacobian J at hand, the directions become the eigenvectors of the Gauss–Newton
    matrix 2 JᵀJ and their curvatures its eigenvalues: conjugate directions whose free Hessian
    estimate (`directions.hessian_estimate`) is 2 JᵀJ itself, measured at the new point at no
    extra cost, where the direction set of the search belongs to where the search ended.
    """
    note = f"{what}: {polished.steps} steps" + (f" ({polished.reason})" if polished.reason else "")
    if polished.value > outcome.value:
        return dataclasses.replace(outcome, notes=tuple(outcome.notes) + (note,))
    directions, curvatures = outcome.directions, outcome.curvatures
    if polished.jacobian is not None and np.all(np.isfinite(polished.jacobian)):
        eigenvalues, eigenvectors = np.linalg.eigh(2.0 * polished.jacobian.T @ polished.jacobian)
        directions = eigenvectors.T.copy()
        curvatures = np.where(eigenvalues > 0.0, eigenvalues, np.nan)
    return dataclasses.replace(
        outcome,
        point=polished.point,
        value=polished.value,
        stop=polished.stop,
        reason=polished.reason,
        directions=directions,
        curvatures=curvatures,
        notes=tuple(outcome.notes) + (note,),
    )
