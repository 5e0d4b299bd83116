"""Derivative-free Gauss–Newton steps in a trust region, on the residual vector itself.

Theory of operation.  Every evaluation of a calibration returns the whole residual vector
``r(u)``, not just ``S = |r|²``.  This generator keeps a Jacobian ``J`` of ``r`` (scaled
coordinates) and steps to the minimizer of the linear model ``|r + J p|²`` inside a trust region
``|D p| <= radius``:

- The first Jacobian is made by forward differences (``p`` evaluations in one batch).
- The step solves the trust-region problem with Moré's (1978) Levenberg–Marquardt parameter: the
  Gauss–Newton step when it fits in the region, else the damped step ``(JᵀJ + lambda D²) p = -Jᵀr``
  whose scaled length is the radius to within a tenth.  ``D`` holds the largest column norms of
  the Jacobians made by differences so far (Moré 1978, sec. 6), so that the region follows the
  parameters' own sensitivity (not of secant updates: one after a wild rejected step would
  raise ``D`` for good).
- The first radius is ``|D x|``, the size of the start itself (Moré's factor 1, inside the 0.1
  to 100 his MINPACK guide allows): with a hundred, the first Gauss-Newton step of the linear
  model at NIST's MGH09 start 1 was taken whole and threw the parameters thirty times past the
  data's scale, onto the side (b1 < 0, b2 = c / b1 -> -inf) where S falls along a valley to
  infinity towards about 9.45e-4, three times the certified minimum: no finite step leaves it.
- The radius is halved after a step whose actual decrease is below a quarter of the predicted
  one, and set to twice the step after a step that earned three quarters (Moré 1978, sec. 7).
- After every evaluation the Jacobian is moved by Broyden's (1965) rank-one secant update
  ``J += (r_new - r - J p) pᵀ / pᵀp``, so that a step costs one evaluation.
- A fresh forward-difference Jacobian is paid for only when the secant model proves poor: a step
  earned less than a tenth of its prediction, or the model sees almost nothing left to gain
  while its steps are not small.  A step the secant model rejects does not shrink the radius:
  the model failed, not the region.
- The end is decided on a central-difference Jacobian made at the point itself (a secant or
  forward one would leave the fixed point of a wrong model): it is paid for when the cheaper
  model sees nothing left, and it ends the search when its step is within a tenth of the point
  tolerance of every parameter's size and its predicted decrease within ``value_tolerance``
  relative to ``S`` (or the noise level), or it predicts no decrease above rounding and noise,
  or the radius has shrunk below the point tolerance.  Otherwise its step is taken; after a
  short one (within a hundred of those tolerances) the central Jacobian, moved by the secant
  update, still decides, after a longer one the search goes on.  Without noise, a step too
  small for S to show a decrease but larger than the point tolerance is taken on the model's
  word, while such steps keep halving.  When the region has shrunk to the point tolerance on
  the poor steps of forward or secant Jacobians (an ill-conditioned fit) while the central
  Jacobian's own step is still longer than the tolerances, that step is taken the same way.
  Never on a count of steps; the driver may end it early by throwing `records.Halt` (budget,
  time, interrupt).
- Noise: the floor of S is derived at every point from the residuals' own noise (`value_noise`;
  the noise of S grows with the residuals, so a level of S measured at the start is far too
  large near a small-residual minimum).  With no noise stated, steps that would stall measure
  the residuals' noise along a line (`residual_noise_level`, Moré & Wild 2011) and, if it is
  above rounding, start again with difference steps and floors above it (the forward step
  ``sqrt(noise / |r|)`` relative, Moré & Wild 2012).

Without noise the central differences use the step ``eps^(1/3)`` in scaled units: a check of
the point that differences the residuals with that step gets its points back from the driver's
cache.

References
----------
.. [1] J. J. Moré, "The Levenberg–Marquardt algorithm: implementation and theory",
   in *Numerical Analysis* (proceedings of the Dundee biennial conference, 1977), Springer,
   Berlin, 1978, 105-116.
.. [2] C. G. Broyden, "A class of methods for solving nonlinear simultaneous equations",
   *Mathematics of Computation* 19 (1965) 577-593.
.. [3] D. W. Marquardt, "An algorithm for least-squares estimation of nonlinear parameters",
   *Journal of the Society for Industrial and Applied Mathematics* 11 (1963) 431-441.
.. [4] J. J. Moré and S. M. Wild, "Estimating computational noise", *SIAM Journal on Scientific
   Computing* 33(3) (2011) 1292-1314.
.. [5] J. J. Moré and S. M. Wild, "Estimating derivatives of noisy simulations", *ACM
   Transactions on Mathematical Software* 38(3) (2012) 19:1-19:21.
"""

from __future__ import annotations

import math
from collections.abc import Generator

import numpy as np

from directional.errors import ProblemError
from directional.method.leastsquares import (
    DIFFERENCE_STEP,
    Polished,
    SumOfSquares,
    central_jacobian,
    forward_jacobian,
    held_at_bounds,
    magnitude,
)
from directional.method.noise import (
    DETECTED,
    GROWTH,
    TOO_SMALL,
    detected_level,
    difference_table,
    offsets,
    random_direction,
)
from directional.method.space import Space
from directional.records import Batch, Halt, Purpose, Stop

EPSILON = float(np.finfo(float).eps)
TINY = math.sqrt(float(np.finfo(float).tiny))  # its square is still a normal number
FIRST_RADIUS = 1.0  # first radius, times |D x| (Moré 1978, sec. 7; MINPACK's guide allows 0.1 to 100)
POOR = 0.1  # a step that earned less than this share of its prediction: the model is poor
SHRINK = 0.25  # below this share the radius is halved (Moré 1978)
GROW = 0.75  # above it the radius becomes twice the step (ibid.)
ROUNDING = 16.0 * EPSILON  # a decrease of S below this share of it is rounding
ACCEPT = 1e-4  # a step is taken when it earned at least this share of its prediction (ibid.)
NEAR = 100.0  # after a step this many (tight) tolerances long a central Jacobian still decides the end
AWAY_STEPS = 8  # the runaway test (`running_away`) reads a law from this many accepted steps at least
AWAY_GROWTH = 2.0  # ... along which |x_i| grew by this factor twice (the Aitken points t0, t1, t2)
AWAY_MESH = 1.1  # ... with accepted points within this factor of t0 and t1
AWAY_FAR = 10.0  # ... ending this many times beyond its magnitude at the start (or its scale)
AWAY_SHARE = 1e-3  # ... and the gain still to come (extrapolated) be below this share of S


def gauss_newton(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    value: float,
    *,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    noise: float | None = None,
    residual_noise: float | None = None,
    notice: bool = False,
) -> Generator[Batch, np.ndarray, Polished]:
    """Gauss–Newton trust-region steps from scaled point ``u0`` (value ``value``), until converged.

    ``noise`` (absolute, in units of S at ``u0``; None for rounding only) or, better,
    ``residual_noise`` (the standard deviation of one entry of the residual vector the search
    sees) sets the floor of the decrease worth having and the difference steps.  The noise of
    S is not constant: it scales with the residuals' size (`value_noise`), so a level measured
    in S at the start, where the residuals are large, is turned into the residuals' own level
    once and the floor in S is derived from it at every point.  ``notice`` (no noise stated):
    where the steps would stall with rounding assumed, the residuals' noise is measured along a
    line (`residual_noise_level`) and, if found, the steps start again above it.  Returns where
    it ended, with the Jacobian at that point and how it was made (``"forward"`` or
    ``"secant"``), and the residuals' noise noticed (None if none was).
    """
    u, s = np.array(u0, dtype=float), float(value)
    steps = 0
    jacobian: np.ndarray | None = None
    made: np.ndarray | None = None
    kind = ""

    central: np.ndarray | None = None  # the central-difference Jacobian made at u, if any

    heard: float | None = None  # the residuals' noise noticed here

    def ended(stop: Stop, reason: str = "") -> Polished:
        made, how = (central, "central") if central is not None else (jacobian, kind)
        return Polished(point=u, value=s, stop=stop, reason=reason, steps=steps,
                        jacobian=made, jacobian_kind=how, noise=heard)

    r = squares.vector(space.to_user(u))
    if r is None:
        return ended(Stop.STALLED, "no residuals at the start of the Gauss-Newton steps")
    sigma = residual_level(noise, value) if residual_noise is None else float(residual_noise)
    if not sigma > 0.0:
        sigma = 0.0
    noise = value_noise(sigma, s, r.size) if sigma > 0.0 else None
    floor = 0.0 if noise is None else noise
    scales = np.zeros(space.size)
    radius = math.nan
    wanted = "forward"  # the Jacobian to make before the next step ("": keep the secant one)
    blind = math.inf  # the length of the last step taken below what S can resolve
    accurate = False  # the Jacobian is central, made here or a short step away (secant since)
    trail: list[tuple[np.ndarray, float]] = [(space.to_user(u), s)]  # accepted points, values
    near = np.maximum(np.abs(trail[0][0]), np.abs(space.scale))  # beyond AWAY_FAR times: far
    try:
        while True:
            if sigma > 0.0:  # the noise of S here, from the residuals' own level
                noise = floor = value_noise(sigma, s, r.size)
            if wanted == "forward":
                made = yield from forward_jacobian(
                    space, squares, u, r, math.sqrt(relative_noise(noise, s)))
            elif wanted == "central":
                made = yield from central_jacobian(
                    space, squares, u, central_step(noise, s, jacobian), point_tolerance)
            if wanted == "forward" and made is None and jacobian is not None:
                wanted, radius = "", 0.5 * radius  # the secant model, in a smaller region
            elif wanted:
                if made is None:
                    return ended(Stop.STALLED, "an evaluation for the Jacobian failed")
                jacobian, kind = made, wanted
                central = made.copy() if wanted == "central" else None
                accurate, wanted = central is not None, ""
                # the scales follow only Jacobians made by differences at a taken point: a
                # secant update from a wild rejected step (residuals of 1e38 on MGH10) would
                # otherwise raise D for good and collapse the region in user terms
                scales = np.maximum(scales, np.sqrt(np.sum(jacobian**2, axis=0)))
            assert jacobian is not None
            d = np.where(scales > 0.0, scales, 1.0)
            size = float(np.linalg.norm(d * magnitude(space, u)))
            if not math.isfinite(radius):
                radius = FIRST_RADIUS * size
            held = held_at_bounds(space, u, jacobian, r)
            p = bounded_step(jacobian, r, d, radius, u - space.lower_u, space.upper_u - u, held)
            trial = u + p
            length = float(np.linalg.norm(d * p))
            predicted = s - float(np.sum((r + jacobian @ p) ** 2))
            small = max(value_tolerance * s, floor)
            seen = max(ROUNDING * s, floor)  # a decrease below this cannot be told from zero
            # Steps within a tenth of the point tolerance of each parameter's own size (1e-3 of
            # the problem's size at least: a parameter at zero), so that the slow last
            # convergence of a large-residual fit leaves no larger error than the last step.
            tight = 0.1 * point_tolerance * np.maximum(np.abs(space.origin / space.scale + u), 1e-3)
            close = np.abs(p) <= tight
            limited = length >= 0.9 * radius  # the region, not the model, set the step
            if limited and radius <= point_tolerance * size:
                # the region has shrunk to the point tolerance: decide on an accurate Jacobian
                # whether the model's own (unlimited) step still sees a decrease
                if not accurate:
                    wanted = "central"
                    continue
                free = bounded_step(jacobian, r, d, math.inf, u - space.lower_u,
                                    space.upper_u - u, held)
                gain = s - float(np.sum((r + jacobian @ free) ** 2))
                reach = float(np.linalg.norm(d * free))
                if (gain > seen and not np.all(np.abs(free) <= tight) and reach < 0.5 * blind
                        and floor == 0.0):
                    # the region shrank on the poor steps of forward or secant Jacobians (an
                    # ill-conditioned fit: NIST's MGH09), but the central one still steps
                    # beyond the point tolerance: taken on its word, as a step S cannot see
                    x = space.to_user(u + free)
                    values = yield Batch(points=x[None, :], purpose=Purpose.GAUSS_NEWTON)
                    new = squares.vector(x) if math.isfinite(values[0]) else None
                    if new is not None and not values[0] > s + seen:
                        u, r, s, blind = u + free, new, float(values[0]), reach
                        radius = max(radius, 2.0 * reach)
                        steps += 1
                        central, accurate, wanted = None, False, "central"
                        continue
                if gain <= small:
                    return ended(Stop.CONVERGED)
                if notice and heard is None and sigma == 0.0:
                    # a Jacobian differenced at rounding-sized steps of noisy residuals is
                    # noise itself: measure the noise and start again with steps above it
                    level = yield from residual_noise_level(space, squares, u)
                    # a level within a thousand roundings of the residuals is rounding, which
                    # the steps already assume: a smooth misfit that stalls for other reasons
                    rounding = 1e3 * EPSILON * float(np.max(np.abs(r)))
                    heard = level if math.isfinite(level) and level > rounding else 0.0
                    if heard > 0.0:
                        sigma, radius, scales = heard, math.nan, np.zeros(space.size)
                        central, accurate, wanted = None, False, "forward"
                        continue
                return ended(Stop.STALLED, "the trust region shrank to the point tolerance while "
                             "the model still saw a decrease (failed or noisy points)")
            if not limited and ((np.all(close) and predicted <= small) or not predicted > seen):
                if not accurate:
                    wanted = "central"
                    continue
                if np.all(close) or not length < 0.5 * blind or floor > 0.0:
                    return ended(Stop.CONVERGED)  # on an accurate Jacobian made here: the end
                # a step S cannot see but the point tolerance asks for: taken on the model's word
                x = space.to_user(trial)
                values = yield Batch(points=x[None, :], purpose=Purpose.GAUSS_NEWTON)
                new = squares.vector(x) if math.isfinite(values[0]) else None
                if new is None or values[0] > s + seen:
                    return ended(Stop.CONVERGED)
                u, r, s, blind = trial, new, float(values[0]), length
                steps += 1
                central, accurate, wanted = None, False, "central"
                continue
            if predicted <= small and kind == "secant":
                wanted = "forward"  # little left to gain by steps that are not small: stale
                continue
            x = space.to_user(trial)
            values = yield Batch(points=x[None, :], purpose=Purpose.GAUSS_NEWTON)
            new = squares.vector(x) if math.isfinite(values[0]) else None
            if new is None:
                radius = 0.5 * length  # a failed point: try nearer (failures may be scattered)
                continue
            s_new = float(values[0])
            actual = s - s_new
            ratio = actual / predicted
            jacobian = jacobian + np.outer(new - r - jacobian @ p, p) / float(p @ p)
            stale, kind = kind == "secant", "secant"
            if ratio < POOR and stale:
                wanted = "forward"  # the secant model is poor, not the region: a fresh Jacobian
            elif ratio < SHRINK:
                radius = 0.5 * min(radius, length)
            elif ratio >= GROW:
                radius = max(radius, 2.0 * length)
            if ratio >= ACCEPT:
                u, r, s = trial, new, s_new
                steps += 1
                trail.append((space.to_user(u), s))
                away, limit = running_away(trail, AWAY_SHARE, near)
                if away:
                    names = ", ".join(space.names[i] for i in away)
                    return ended(Stop.STALLED, f"{names} running away without bound while the "
                                 "decrease of S dies out: the fit approaches a limit at infinity "
                                 f"(an asymptote of the model; S tends to about {limit:.4g}), not "
                                 "a minimum at a finite point")
                central = None
                # a short step from an accurate Jacobian leaves it accurate (secant-updated)
                accurate = accurate and bool(np.all(np.abs(p) <= NEAR * tight))
    except Halt as halt:
        return ended(halt.stop, halt.reason)


def running_away(trail: list[tuple[np.ndarray, float]], share: float,
                 near: np.ndarray) -> tuple[list[int], float]:
    """The parameters of a run heading for a limit of S at infinity, and that limit; or none.

    ``trail`` holds the accepted points (user units) and their values S in order.  A parameter
    runs away when its magnitude ``t`` grew at every step of the run's end while S fell, and
    now stands `AWAY_FAR` times beyond ``near`` (its magnitude at the start, or its scale if
    larger): a parameter growing from near zero on its way to a finite minimum is no runaway.
    Along that run S is taken to approach its limit like ``S(t) = S_inf + c t^-p`` (an
    asymptote: MGH09's model with ``b2 -> -inf`` has ``p = 1``).  At ``t0, t1, t2`` spaced by
    `AWAY_GROWTH` at the end of the run (accepted points within `AWAY_MESH` of them,
    `AWAY_STEPS` steps at least since ``t0``: a leap of one step tells no law) the differences
    of S form a geometric series of ratio ``theta = (S1 - S2) / (S0 - S1) = (t1/t0)^-p``;
    ``theta < 1`` (the gains shrink in step, ``p > 0``) and the sum of the rest,
    ``(S1 - S2) theta / (1 - theta)``, is the extrapolated gain still to come (Aitken's
    delta-squared process [1]_).  When that gain is below ``share`` of S, the run only creeps
    towards a limit at infinity (or an asymptote of the model) which no finite point reaches:
    better ended than left to spend its budget.  Returns the indices of the runaway parameters
    (empty: keep going) and the lowest extrapolated limit of S among them (nan if none).

    .. [1] A. C. Aitken, "On Bernoulli's numerical solution of algebraic equations",
       *Proceedings of the Royal Society of Edinburgh* 46 (1926) 289-305.

    >>> trail = [(np.array([1.1 ** k, 1.0]), 1.0 + 1.1 ** -k) for k in range(1, 200)]
    >>> away, limit = running_away(trail, 1e-6, np.ones(2))
    >>> away, round(limit, 6)
    ([0], 1.0)
    >>> running_away(trail[:40], 1e-6, np.ones(2))[0]
    []
    """
    found: list[int] = []
    limit = math.nan
    if len(trail) < AWAY_STEPS + 1:
        return found, limit
    points = np.abs(np.array([x for x, _ in trail]))
    values = np.array([v for _, v in trail])
    falling = np.diff(values) < 0.0
    for i in range(points.shape[1]):
        broken = np.flatnonzero(~(falling & (np.diff(points[:, i]) > 0.0)))
        start = 0 if broken.size == 0 else int(broken[-1]) + 1  # the last unbroken run
        if len(trail) - 1 - start < AWAY_STEPS:
            continue
        t, v = points[start:, i], values[start:]
        if not (t[-1] >= AWAY_FAR * near[i] and t[0] * AWAY_GROWTH**2 <= t[-1]):
            continue
        # the last stretch of growth by AWAY_GROWTH twice, sampled finely enough to see its law
        logs = np.log(np.maximum(t, TINY))
        wanted = logs[-1] - math.log(AWAY_GROWTH) * np.array([2.0, 1.0])
        picks = np.argmin(np.abs(logs[:, None] - wanted[None, :]), axis=0)
        if (np.max(np.abs(logs[picks] - wanted)) > math.log(AWAY_MESH)
                or len(t) - 1 - picks[0] < AWAY_STEPS):
            continue
        first, second = v[picks[0]] - v[picks[1]], v[picks[1]] - v[-1]
        if not (first > 0.0 and second > 0.0 and second < first):
            continue
        theta = second / first
        left = second * theta / (1.0 - theta)
        if left <= share * v[-1]:
            found.append(i)
            limit = float(np.fmin(limit, v[-1] - left))
    return found, limit


def residual_noise_level(
    space: Space, squares: SumOfSquares, u: np.ndarray, *, points: int = 9, retries: int = 2
) -> Generator[Batch, np.ndarray, float]:
    """The noise of one residual near scaled point ``u`` (nan when none is detected).

    Moré & Wild's (2011) difference table (`noise.difference_table`) of every residual along one
    random direction (seed 0) through ``u``: one batch of ``points`` evaluations gives a table for
    each entry of the vector.  The level is the median of the entries' detected levels when most
    entries detect one; when most see steps too small the step grows a hundredfold, when most
    see the smooth part it shrinks a hundredfold (ibid.), at most ``retries`` times.  No test for
    values that spread too far: a residual near zero spreads by its noise alone.
    """
    direction = random_direction(space.size, np.random.default_rng(0))
    lo, hi = space.segment(u, direction)
    h = 1e-6
    for _ in range(retries + 1):
        try:
            t = offsets(points, h, lo, hi)
        except ProblemError:
            return math.nan
        xs = space.to_user(u + t[:, None] * direction)
        values = yield Batch(points=xs, purpose=Purpose.NOISE)
        vectors = [squares.vector(x) if math.isfinite(v) else None for x, v in zip(xs, values)]
        if any(r is None for r in vectors):
            return math.nan
        stack = np.stack(vectors)  # type: ignore[arg-type]
        found, verdicts = [], []
        for column in stack.T:
            levels, changes, status = difference_table(column, None)
            verdicts.append(status)
            if status == DETECTED:
                found.append(detected_level(levels, changes)[0])
        if 2 * len(found) > len(verdicts):
            return float(np.median(found))
        if 2 * verdicts.count(TOO_SMALL) > len(verdicts):
            h *= GROWTH
        else:
            h /= GROWTH
    return math.nan


def residual_level(noise: float | None, value: float) -> float:
    """The standard deviation of one residual from the noise ``noise`` of S measured where
    S is ``value``: the inverse of `value_noise` without its small second-order term,
    ``noise / (2 sqrt(S))`` (``sqrt(noise)`` where S is nearly zero); 0 for no noise.

    >>> residual_level(1e-6, 25.0)
    1e-07
    """
    if noise is None or not math.isfinite(noise) or noise <= 0.0:
        return 0.0
    return float(noise) / max(2.0 * math.sqrt(max(value, 0.0)), math.sqrt(float(noise)))


def value_noise(sigma: float, value: float, size: int) -> float:
    """The standard deviation of ``S = |r + e|²`` when each of the ``size`` residuals carries
    independent noise ``e`` of standard deviation ``sigma``: ``S = |r|² + 2 r·e + |e|²``, and for
    normal ``e`` the two terms are uncorrelated with variances ``4 |r|² sigma²`` and
    ``2 m sigma⁴`` (the variance of a scaled chi-square with m degrees of freedom), so
    ``sqrt(4 S sigma² + 2 m sigma⁴)`` (common practice: the moments of a noncentral
    chi-square, e.g. Johnson, Kotz & Balakrishnan, *Continuous Univariate Distributions* 2,
    1995, ch. 29).  Near a small-residual minimum it is far below its value at the start.

    >>> round(value_noise(0.01, 1.0, 7), 6)
    0.020003
    """
    return math.sqrt(4.0 * max(value, 0.0) * sigma**2 + 2.0 * size * sigma**4)


def relative_noise(noise: float | None, value: float) -> float:
    """The noise of the residuals relative to their size, at least the rounding ``eps``.

    A noise ``e`` in each residual moves ``S`` by ``2 r·e``, of standard deviation ``2 |r| e``,
    so the residuals' own level is ``noise / (2 sqrt(S))`` (``sqrt(noise)`` where ``S`` is nearly
    zero); relative to ``|r| = sqrt(S)`` (common practice, no source).

    >>> relative_noise(None, 25.0) == EPSILON, relative_noise(1e-6, 25.0)
    (True, 2e-08)
    """
    if noise is None or not math.isfinite(noise) or noise <= 0.0:
        return EPSILON
    level = float(noise) / max(2.0 * math.sqrt(max(value, 0.0)), math.sqrt(float(noise)))
    return max(EPSILON, level / max(math.sqrt(max(value, 0.0)), 1e-300))


def central_step(
    noise: float | None, value: float, jacobian: np.ndarray | None
) -> np.ndarray | float:
    """Steps of a central difference (scaled units): ``eps^(1/3)`` with no noise, else the step
    that balances truncation ``h² T / 6`` against noise ``e / h`` (common practice, no source):
    ``(3 e / c)^(1/3)`` with ``e`` the noise of one residual and ``c``, the largest entry of each
    column of the last Jacobian, standing in for the third derivative ``T``.

    Without noise the curvature check of a calibration differences the residuals at the same
    points, so that they come back from the driver's cache.
    """
    if noise is None or not noise > 0.0 or jacobian is None:
        return DIFFERENCE_STEP
    level = relative_noise(noise, value) * math.sqrt(max(value, 0.0))  # absolute, one residual
    c = np.max(np.abs(jacobian), axis=0)
    with np.errstate(divide="ignore"):
        return np.maximum(DIFFERENCE_STEP, np.where(c > 0.0, (3.0 * level / c) ** (1.0 / 3.0), 0.1))


def bounded_step(
    jacobian: np.ndarray,
    r: np.ndarray,
    d: np.ndarray,
    radius: float,
    below: np.ndarray,
    above: np.ndarray,
    held: np.ndarray,
) -> np.ndarray:
    """The trust-region step kept inside the bounds: the better of two candidates for the model.

    ``below`` and ``above`` are the room from the point down to the lower and up to the upper
    bounds; parameters ``held`` do not move.  The candidates (common practice, no source): the
    unconstrained step cut back to the first bound it meets (along a descent direction of the
    model, so it never raises the model), and the step re-solved with each parameter that would
    leave its bounds fixed on that bound, repeated until none leaves.  The one that lowers the
    model ``|r + J p|²`` more is returned.

    >>> bounded_step(np.eye(2), np.array([-3.0, -4.0]), np.ones(2), 10.0,
    ...              np.full(2, 10.0), np.array([1.0, 10.0]), np.zeros(2, bool))
    array([1., 4.])
    """
    n = jacobian.shape[1]
    p = trust_region_step(jacobian * ~held, r, d, radius)
    with np.errstate(divide="ignore", invalid="ignore"):
        reach = np.where(p > 0.0, above / p, np.where(p < 0.0, -below / p, np.inf))
    cut = min(1.0, float(np.min(reach))) * p
    fixed, base, active = held.copy(), np.zeros(n), p
    for _ in range(n):
        leaving = ~fixed & ((active > above) | (active < -below))
        if not leaving.any():
            break
        base = np.where(leaving, np.clip(active, -below, above), base)
        fixed |= leaving
        active = base + trust_region_step(jacobian * ~fixed, r + jacobian @ base, d, radius)
    active = np.clip(active, -below, above)

    def model(step: np.ndarray) -> float:
        return float(np.sum((r + jacobian @ step) ** 2))

    return active if model(active) < model(cut) else cut


def trust_region_step(
    jacobian: np.ndarray, r: np.ndarray, d: np.ndarray, radius: float
) -> np.ndarray:
    """The minimizer of ``|r + J p|²`` subject to ``|D p| <= radius`` (Moré 1978, sec. 5).

    The Gauss–Newton step (minimum norm, through the SVD of ``J D⁻¹``) when it fits; else the
    Levenberg–Marquardt step ``(JᵀJ + lambda D²) p = -Jᵀr`` with lambda found by Newton's method on
    ``1/radius - 1/|D p(lambda)|`` (Hebden 1973, as in Moré 1978), to a tenth of the radius.
    Columns of zeros (parameters held at a bound) get no step.

    >>> trust_region_step(np.eye(2), np.array([-3.0, -4.0]), np.ones(2), 10.0)
    array([3., 4.])
    >>> trust_region_step(np.eye(2), np.array([-3.0, -4.0]), np.ones(2), 1.0).round(3)
    array([0.6, 0.8])
    """
    u_, sigma, vt = np.linalg.svd(jacobian / d, full_matrices=False)
    # singular values below rounding (or so small that their squares underflow) count as zero
    kept = sigma > max(EPSILON * max(jacobian.shape) * (sigma[0] if sigma.size else 0.0), TINY)
    b = -(u_.T @ r)
    if kept.any():  # lambda in units of the largest sigma²: q(lambda) does not change
        b, sigma = b / sigma[0], sigma / sigma[0]

    def scaled(lam: float) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = np.where(kept, sigma / (sigma**2 + lam), 0.0)
        return vt.T @ (factor * b)

    q = scaled(0.0)
    norm = float(np.linalg.norm(q))
    if norm <= radius:
        return q / d
    lo, hi = 0.0, float(np.linalg.norm(sigma * b)) / radius  # |q(hi)| <= radius (Moré 1978)
    lam = hi if hi > 0.0 else 0.0
    for _ in range(60):
        q = scaled(lam)
        norm = float(np.linalg.norm(q))
        if abs(norm - radius) <= 0.1 * radius:
            break
        if norm > radius:
            lo = lam
        else:
            hi = lam
        # d|q|/dlam = -sum(sigma² b² / (sigma² + lam)³) / |q|
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = -float(np.sum(np.where(kept, sigma**2 * b**2 / (sigma**2 + lam) ** 3, 0.0))) / norm
        newton = lam - (norm / radius) * (norm - radius) / slope if slope < 0.0 else math.nan
        lam = newton if lo < newton < hi else (math.sqrt(lo * hi) if lo > 0.0 else 0.1 * hi)
    if norm > 1.1 * radius:  # not found (rounding): the damped step cut back stays a descent
        q = q * (radius / norm)
    return q / d
