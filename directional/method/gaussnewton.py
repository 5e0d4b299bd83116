"""Derivative-free Gauss–Newton steps in a trust region, on the residual vector itself.

Theory of operation.  Every evaluation of a calibration returns the whole residual vector
``r(u)``, not just ``S = |r|²``.  This generator keeps a Jacobian ``J`` of ``r`` (scaled
coordinates) and steps to the minimizer of the linear model ``|r + J p|²`` inside a trust region
``|D p| <= radius``:

- The first Jacobian is made by forward differences (``p`` evaluations in one batch).
- The step solves the trust-region problem with Moré's (1978) Levenberg–Marquardt parameter: the
  Gauss–Newton step when it fits in the region, else the damped step ``(JᵀJ + lambda D²) p = -Jᵀr``
  whose scaled length is the radius to within a tenth.  ``D`` holds the largest column norms of
  the Jacobians seen so far (Moré 1978, sec. 6), so that the region follows the parameters' own
  sensitivity.
- The radius is halved after a step whose actual decrease is below a quarter of the predicted
  one, and set to twice the step after a step that earned three quarters (Moré 1978, sec. 7).
- After every evaluation the Jacobian is moved by Broyden's (1965) rank-one secant update
  ``J += (r_new - r - J p) pᵀ / pᵀp``, so that a step costs one evaluation.
- A fresh forward-difference Jacobian is paid for only when the secant model proves poor: a step
  earned less than a tenth of its prediction, or the stopping test is met on a secant Jacobian
  (the test must be met on a Jacobian made at the point itself, or a rounding-free fixed point
  of a wrong model would be returned).

It stops on the model's own criteria, never on a count of steps: the predicted and the actual
decrease are both below ``value_tolerance`` relative to ``S`` (or below the noise level), or the
scaled step is below ``point_tolerance`` relative to the size of the point; or the radius has
shrunk below that size although the Jacobian is fresh (no descent is left that the model can
see).  The driver ends it early by throwing `records.Halt` (budget, time, interrupt).

References
----------
.. [1] J. J. Moré, "The Levenberg–Marquardt algorithm: implementation and theory", in G. A.
   Watson (ed.), *Numerical Analysis*, Lecture Notes in Mathematics 630, Springer, 1978, 105-116.
.. [2] C. G. Broyden, "A class of methods for solving nonlinear simultaneous equations",
   *Mathematics of Computation* 19 (1965) 577-593.
.. [3] D. W. Marquardt, "An algorithm for least-squares estimation of nonlinear parameters",
   *Journal of the Society for Industrial and Applied Mathematics* 11 (1963) 431-441.
.. [4] C. Cartis and L. Roberts, "A derivative-free Gauss–Newton method", *Mathematical
   Programming Computation* 11 (2019) 631-674.
"""

from __future__ import annotations

import math
from collections.abc import Generator

import numpy as np

from directional.method.leastsquares import (
    Polished,
    SumOfSquares,
    central_jacobian,
    forward_jacobian,
    held_at_bounds,
    magnitude,
)
from directional.method.space import Space
from directional.records import Batch, Halt, Purpose, Stop

EPSILON = float(np.finfo(float).eps)
TINY = math.sqrt(float(np.finfo(float).tiny))  # its square is still a normal number
FIRST_RADIUS = 100.0  # first radius, times |D x|: the first Gauss-Newton step is rarely cut (Moré 1978)
POOR = 0.1  # a step that earned less than this share of its prediction: the model is poor
SHRINK = 0.25  # below this share the radius is halved (Moré 1978)
GROW = 0.75  # above it the radius becomes twice the step (ibid.)
ROUNDING = 16.0 * EPSILON  # a decrease of S below this share of it is rounding
ACCEPT = 1e-4  # a step is taken when it earned at least this share of its prediction (ibid.)
NEAR = 10.0  # within this many (tight) point tolerances a central Jacobian still counts as made here


def gauss_newton(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    value: float,
    *,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    noise: float | None = None,
) -> Generator[Batch, np.ndarray, Polished]:
    """Gauss–Newton trust-region steps from scaled point ``u0`` (value ``value``), until converged.

    ``noise`` (absolute, in units of S; None for rounding only) sets the floor of the decrease
    worth having and the forward-difference step.  Returns where it ended, with the Jacobian at
    that point and how it was made (``"forward"`` or ``"secant"``).
    """
    u, s = np.array(u0, dtype=float), float(value)
    steps = 0
    jacobian: np.ndarray | None = None
    kind = ""

    def ended(stop: Stop, reason: str = "") -> Polished:
        return Polished(point=u, value=s, stop=stop, reason=reason, steps=steps,
                        jacobian=jacobian, jacobian_kind=kind)

    r = squares.vector(space.to_user(u))
    if r is None:
        return ended(Stop.STALLED, "no residuals at the start of the Gauss-Newton steps")
    floor = 0.0 if noise is None else float(noise)
    relative = max(EPSILON, floor / s) if s > 0.0 else EPSILON
    scales = np.zeros(space.size)
    radius = math.nan
    wanted = "forward"  # the Jacobian to make before the next step ("": keep the secant one)
    accurate = False  # a central-difference Jacobian, moved by secant updates only since
    try:
        while True:
            if wanted:
                made = yield from (
                    forward_jacobian(space, squares, u, r, math.sqrt(relative)) if wanted == "forward"
                    else central_jacobian(space, squares, u, relative ** (1.0 / 3.0))
                )
                if made is None:
                    return ended(Stop.STALLED, "an evaluation for the Jacobian failed")
                jacobian, kind, wanted = made, wanted, ""
                accurate = kind == "central"
            assert jacobian is not None
            scales = np.maximum(scales, np.sqrt(np.sum(jacobian**2, axis=0)))
            d = np.where(scales > 0.0, scales, 1.0)
            sizes = magnitude(space, u)
            size = float(np.linalg.norm(d * sizes))
            if not math.isfinite(radius):
                radius = FIRST_RADIUS * size
            held = held_at_bounds(space, u, jacobian, r)
            p = bounded_step(jacobian, r, d, radius, u - space.lower_u, space.upper_u - u, held)
            trial = u + p
            length = float(np.linalg.norm(d * p))
            predicted = s - float(np.sum((r + jacobian @ p) ** 2))
            small = max(value_tolerance * s, floor)
            seen = max(ROUNDING * s, floor)  # a decrease below this cannot be told from zero
            # within a tenth of the point tolerance of each parameter's own size (1e-3 of the
            # problem's size at least: a parameter at zero), so that a slow last convergence of
            # a large-residual fit does not leave a larger error than the last step
            tight = 0.1 * point_tolerance * np.maximum(np.abs(space.origin / space.scale + u), 1e-3)
            close = np.all(np.abs(p) <= tight)
            if (close and predicted <= small) or not predicted > seen:
                # nothing left that the model can see: on an accurate Jacobian that is the end
                if not accurate:
                    wanted = "central"
                    continue
                if np.any(p != 0.0):  # its last step is one evaluation, and near-exact
                    x = space.to_user(trial)
                    values = yield Batch(points=x[None, :], purpose=Purpose.GAUSS_NEWTON)
                    if values[0] < s:
                        u, s = trial, float(values[0])
                        steps += 1
                return ended(Stop.CONVERGED)
            x = space.to_user(trial)
            values = yield Batch(points=x[None, :], purpose=Purpose.GAUSS_NEWTON)
            new = squares.vector(x) if math.isfinite(values[0]) else None
            if new is None:
                radius = 0.25 * length
                continue
            s_new = float(values[0])
            actual = s - s_new
            ratio = actual / predicted
            jacobian = jacobian + np.outer(new - r - jacobian @ p, p) / float(p @ p)
            stale, kind = kind == "secant", "secant"
            if ratio < POOR and stale:
                wanted = "forward"  # the secant model is poor, not the region: a fresh Jacobian
                accurate = False
            elif ratio < SHRINK:
                radius = 0.5 * min(radius, length)
            elif ratio >= GROW:
                radius = max(radius, 2.0 * length)
            if ratio >= ACCEPT:
                u, r, s = trial, new, s_new
                steps += 1
                # a Jacobian made far from here no longer decides the end
                accurate = accurate and bool(np.all(np.abs(p) <= NEAR * tight))
            if radius <= point_tolerance * size:
                if accurate:
                    return ended(Stop.CONVERGED, "")
                wanted = "central"  # no room left: decide on an accurate Jacobian
    except Halt as halt:
        return ended(halt.stop, halt.reason)


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
    return q / d
