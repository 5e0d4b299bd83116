"""Reference baseline for calibrations, not part of the method: a textbook Levenberg–Marquardt.

Written from the papers for the calibration benchmark, so that the evaluations `dl.calibrate`
spends can be set beside those of the method a least-squares user would otherwise pick.  Nothing
in `directional` calls it, and it is not tuned: the constants are those the papers give.

Theory of operation.  The residuals ``f(x)`` (a vector of ``m``) are linearized at ``x`` with a
forward-difference Jacobian ``J`` (``p`` new evaluations, one per parameter).  The step ``s``
minimizes ``||f + J s||`` inside the trust region ``||D s|| <= radius`` (Marquardt 1963: it is the
damped Gauss–Newton step ``-(J^T J + lam D^T D)^-1 J^T f`` for the ``lam >= 0`` that puts it on
the boundary; Moré 1978, Algorithm 5.5, finds that ``lam`` to 10 %).  ``D`` scales each parameter
by the norm of its Jacobian column, never decreasing (Moré 1978, eq. 6.3).  The ratio of the
actual to the predicted reduction of ``||f||^2`` decides whether the step is taken (above 1e-4)
and how the radius changes (Moré 1978, section 4: below 1/4 it shrinks by a factor in
[1/10, 1/2] from a quadratic fitted along the step; above 3/4 it becomes twice the step).  A new
Jacobian is paid for only after a step is taken.  The run stops on Moré's tests (section 8):
relative reduction (actual and predicted both below ``ftol``), relative step (radius below
``xtol ||D x||``), orthogonality (every Jacobian column at an angle to ``f`` whose cosine is below
``gtol``), a zero residual, or the budget.

The section, equation and algorithm numbers of Moré (1978) above are cited from memory.

References
----------
.. [1] D. W. Marquardt, "An algorithm for least-squares estimation of nonlinear parameters",
   *Journal of the Society for Industrial and Applied Mathematics* 11(2) (1963) 431-441.
.. [2] J. J. Moré, "The Levenberg–Marquardt algorithm: implementation and theory",
   in *Numerical Analysis* (proceedings of the Dundee biennial conference, 1977), Springer,
   Berlin, 1978, 105-116.
.. [3] J. E. Dennis and R. B. Schnabel, *Numerical Methods for Unconstrained Optimization and
   Nonlinear Equations*, Prentice-Hall (1983), section 5.4 (forward-difference steps).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

Residuals = Callable[[np.ndarray], object]

EPS = float(np.finfo(float).eps)
ROOT_EPS = math.sqrt(EPS)  # forward-difference step relative to |x_j| (Dennis & Schnabel 1983)
ACCEPT = 1e-4  # a step is taken when actual/predicted reduction exceeds this (Moré 1978)
SIGMA = 0.1  # the damped step's length may miss the radius by 10 % (Moré 1978, section 5)
FACTOR = 100.0  # first radius: FACTOR * ||D x0|| (Moré 1978, section 7; from memory)


@dataclass(frozen=True, slots=True, kw_only=True)
class Fit:
    """What the Levenberg–Marquardt baseline found and what it cost.

    ``value`` is the sum of squares ``S = ||f||^2`` at ``point``; ``values`` holds ``S`` of every
    evaluation in order (``inf`` for a failed one), so a benchmark can read how many evaluations
    it took to reach a given ``S``; ``jacobian`` is the last forward-difference Jacobian (at
    ``point`` when the run stopped on a convergence test); ``reason`` names the test that stopped
    the run.
    """

    point: np.ndarray
    value: float
    evaluations: int
    values: np.ndarray
    jacobian: np.ndarray | None
    iterations: int
    reason: str

    def evaluations_to(self, target: float) -> int | None:
        """The count of evaluations after which ``S <= target`` first held, or None."""
        hits = np.flatnonzero(self.values <= target)
        return int(hits[0]) + 1 if hits.size else None


class _Spent(Exception):
    """Raised when the budget of evaluations is used up."""


class _Counted:
    """The residual function with a budget; a failure (exception, NaN, inf, wrong length) is None."""

    def __init__(self, residuals: Residuals, budget: int) -> None:
        self.residuals = residuals
        self.budget = budget
        self.values: list[float] = []
        self.length: int | None = None

    def __call__(self, x: np.ndarray) -> np.ndarray | None:
        if len(self.values) >= self.budget:
            raise _Spent
        try:
            f = np.asarray(self.residuals(np.array(x, dtype=float)), dtype=float).reshape(-1)
        except Exception:  # a failed evaluation, as the driver of `directional` treats it
            f = None
        if f is not None and (not np.all(np.isfinite(f)) or f.size != (self.length or f.size)):
            f = None
        self.values.append(math.inf if f is None else float(f @ f))
        return f


def levenberg_marquardt(
    residuals: Residuals,
    x0: object,
    *,
    budget: int,
    ftol: float = ROOT_EPS,
    xtol: float = ROOT_EPS,
    gtol: float = 0.0,
    precision: float = EPS,
) -> Fit:
    """Minimize ``||residuals(x)||^2`` by Levenberg–Marquardt with Moré's (1978) trust region.

    Every call of ``residuals`` counts against ``budget``, those of the forward-difference
    Jacobians included.  The defaults of ``ftol`` and ``xtol`` (the square root of the machine
    epsilon) are common practice, no source; ``gtol = 0`` leaves the orthogonality test to an
    exactly zero gradient.  ``precision`` is the relative accuracy of the residuals (the
    machine epsilon for a formula; an ODE solver's relative tolerance for a simulation): the
    forward-difference steps are ``sqrt(precision)`` relative (Dennis & Schnabel 1983, section
    5.4), so that rounding or solver error does not swamp the differences.

    >>> fit = levenberg_marquardt(lambda b: np.array([b[0] - 1.0, 10.0 * (b[1] - b[0] ** 2)]),
    ...                           [-1.2, 1.0], budget=500)
    >>> bool(np.allclose(fit.point, [1.0, 1.0])), fit.value < 1e-20
    (True, True)

    Raises
    ------
    ValueError
        When the residuals at ``x0`` cannot be evaluated (exception, NaN or inf).
    """
    x = np.array(x0, dtype=float).reshape(-1)
    counted = _Counted(residuals, int(budget))
    state = {"x": x, "f": None, "J": None, "iterations": 0}
    relative = math.sqrt(max(float(precision), EPS))
    try:
        reason = _iterate(counted, state, ftol, xtol, gtol, relative)
    except _Spent:
        reason = "budget"
    if state["f"] is None:
        raise ValueError(f"residuals at the start {x.tolist()!r} could not be evaluated")
    f = state["f"]
    return Fit(
        point=state["x"].copy(),
        value=float(f @ f),
        evaluations=len(counted.values),
        values=np.array(counted.values),
        jacobian=state["J"],
        iterations=state["iterations"],
        reason=reason,
    )


def _iterate(
    counted: _Counted, state: dict, ftol: float, xtol: float, gtol: float, relative: float
) -> str:
    """The outer iteration of Moré (1978): a Jacobian, then trial steps until one is taken."""
    x = state["x"]
    f = counted(x)
    if f is None:
        return "failed start"
    counted.length = f.size
    state["f"] = f
    scale = radius = None
    lam = 0.0
    while True:
        fnorm = float(np.linalg.norm(f))
        if fnorm == 0.0:
            return "zero residual"
        J = forward_jacobian(counted, x, f, relative)
        if J is None:
            return "failed evaluation in the Jacobian"
        state["J"] = J
        columns = np.linalg.norm(J, axis=0)
        if scale is None:
            scale = np.where(columns > 0.0, columns, 1.0)
            radius = FACTOR * float(np.linalg.norm(scale * x)) or FACTOR
        else:
            scale = np.maximum(scale, columns)  # Moré 1978, eq. 6.3
        cosines = np.abs(J.T @ f) / np.where(columns > 0.0, columns * fnorm, math.inf)
        if float(np.max(cosines, initial=0.0)) <= gtol:
            return "orthogonality"
        state["iterations"] += 1
        first = state["iterations"] == 1
        while True:  # trial steps until one is taken
            step, lam = trust_region_step(J, f, scale, radius, lam)
            length = float(np.linalg.norm(scale * step))
            if first:
                radius = min(radius, length)  # Moré 1978, section 7
                first = False
            trial = x + step
            f_new = counted(trial)
            new_norm = math.inf if f_new is None else float(np.linalg.norm(f_new))
            # Relative reductions of ||f||^2 in Moré's (1978, eq. 4.4) form, free of cancellation
            actual = 1.0 - (new_norm / fnorm) ** 2 if 0.1 * new_norm < fnorm else -1.0
            linear = float(np.linalg.norm(J @ step)) / fnorm
            damping = math.sqrt(lam) * length / fnorm
            predicted = linear**2 + 2.0 * damping**2
            slope = -(linear**2 + damping**2)  # directional derivative along the step, halved
            ratio = actual / predicted if predicted > 0.0 else 0.0
            radius, lam = _update(radius, lam, ratio, actual, slope, length)
            taken = ratio >= ACCEPT
            if taken:
                x, f = trial, f_new
                state["x"], state["f"] = x, f
            if abs(actual) <= ftol and predicted <= ftol and 0.5 * ratio <= 1.0:
                return "relative reduction"
            if radius <= xtol * float(np.linalg.norm(scale * x)):
                return "relative step"
            if taken:
                break


def _update(
    radius: float, lam: float, ratio: float, actual: float, slope: float, length: float
) -> tuple[float, float]:
    """The new radius (and a matching start for ``lam``) from the reduction ratio (Moré 1978)."""
    if ratio <= 0.25:
        # Minimizer of the quadratic through S(0), S'(0) and S(1) along the step, kept in
        # [1/10, 1/2] (Moré 1978, section 4); S(1) -> inf (a failed trial) gives 1/10.
        mu = 0.5 if actual >= 0.0 else 0.5 * slope / (slope + 0.5 * actual)
        mu = min(max(mu, 0.1), 0.5)
        return mu * min(radius, length), lam / mu
    if ratio >= 0.75:
        return 2.0 * length, 0.5 * lam
    return radius, lam


def forward_jacobian(
    counted: Callable, x: np.ndarray, f: np.ndarray, relative: float = ROOT_EPS
) -> np.ndarray | None:
    """Forward differences, column ``j`` from ``x + h_j e_j`` with ``h_j = relative |x_j|``
    (``relative`` where ``x_j = 0``; Dennis & Schnabel 1983, section 5.4, with ``relative`` the
    square root of the residuals' relative accuracy): ``p`` evaluations; None if one failed."""
    J = np.empty((f.size, x.size))
    for j in range(x.size):
        h = relative * (abs(x[j]) if x[j] != 0.0 else 1.0)
        shifted = x.copy()
        shifted[j] += h
        h = shifted[j] - x[j]  # the step the floating-point numbers actually took
        f_j = counted(shifted)
        if f_j is None:
            return None
        J[:, j] = (f_j - f) / h
    return J


def trust_region_step(
    J: np.ndarray, f: np.ndarray, scale: np.ndarray, radius: float, lam: float = 0.0
) -> tuple[np.ndarray, float]:
    """The step ``s`` minimizing ``||f + J s||`` with ``||D s|| <= radius``, and its ``lam``.

    ``lam = 0`` (the Gauss–Newton step, minimum-norm where ``J`` is rank deficient) when that step
    is no longer than ``1.1 radius``; otherwise ``lam`` is found by Moré's (1978, Algorithm 5.5)
    safeguarded Newton iteration on ``phi(lam) = ||D s(lam)|| - radius`` until
    ``|phi| <= 0.1 radius``, starting from the ``lam`` given.  The scaled problem is solved
    through the singular value decomposition of ``J D^-1``, where
    ``||D s(lam)||^2 = sum (sigma_i g_i / (sigma_i^2 + lam))^2`` with ``g = U^T f``.

    >>> step, lam = trust_region_step(np.eye(2), np.array([-3.0, -4.0]), np.ones(2), 10.0)
    >>> step.tolist(), lam
    ([3.0, 4.0], 0.0)
    """
    U, sv, Vt = np.linalg.svd(J / scale, full_matrices=False)
    g = U.T @ f
    kept = sv > sv[0] * EPS * max(J.shape) if sv.size and sv[0] > 0.0 else np.zeros(sv.size, bool)
    s, g = np.where(kept, sv, 0.0), np.where(kept, g, 0.0)

    def scaled(lam: float) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            return -Vt.T @ np.where(kept, s * g / (s * s + lam), 0.0)

    def phi(lam: float) -> tuple[float, float]:
        q = scaled(lam)
        norm = float(np.linalg.norm(q))
        with np.errstate(divide="ignore", invalid="ignore"):
            weights = np.where(kept, s * s * g * g / (s * s + lam) ** 3, 0.0)
        slope = -float(np.sum(weights)) / norm if norm > 0.0 else 0.0
        return norm - radius, slope

    value, slope = phi(0.0)
    if value <= SIGMA * radius:
        return scaled(0.0) / scale, 0.0
    # Bounds on lam (Moré 1978, section 5): the Newton step from 0 when J has full rank, and
    # ||(J D^-1)^T f|| / radius above.
    lower = -value / slope if bool(np.all(kept)) and slope < 0.0 else 0.0
    upper = float(np.linalg.norm(s * g)) / radius
    lam = min(max(lam, lower), upper)
    for _ in range(30):
        if not lower < lam < upper or lam == 0.0:
            lam = max(1e-3 * upper, math.sqrt(lower * upper))
        value, slope = phi(lam)
        if abs(value) <= SIGMA * radius:
            break
        if value < 0.0:
            upper = lam
        lower = max(lower, lam - value / slope)
        lam = lam - ((value + radius) / radius) * (value / slope)
    return scaled(lam) / scale, lam
