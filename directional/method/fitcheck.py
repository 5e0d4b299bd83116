"""Is a least-squares fit a minimum?  The verdict from the Gauss–Newton matrix JᵀJ.

Theory of operation.  At the point a calibration returns, the Hessian of ``S = |r|²`` is

    H = 2 (JᵀJ + A),   A = sum r_i ∇²r_i,

and JᵀJ needs only first derivatives, which survive noise that second differences do not
(a central first difference loses ``noise / h``, a second difference ``noise / h²``).  So the
check measures the Jacobian, not the Hessian:

1. One stencil.  The residual vector at ``u ± h e_k`` along the axes of the free parameters
   (scaled coordinates).  The centre is known, so it costs 2 k evaluations for k free parameters
   at most: with no noise stated the step is ``eps^(1/3)``, the step of the Levenberg–Marquardt
   finish's own central differences (`leastsquares.difference_jacobian`), so where that finish
   ended on this point its last Jacobian's points come back from the driver's cache for nothing.
   One more point per parameter on a bound gives its one-sided column into the interior, for the
   identifiability test of `directional.api.calibration`.
2. Error bars.  Each entry of the central difference ``a_k = (r+ - r-) / (2 h)`` is given the gap
   between it and the one-sided difference ``(r+ - r0) / h``, that is ``|r+ - 2 r0 + r-| / (2 h)``
   (the lower-order estimate's error bounds the higher-order one's while truncation falls with
   the order; common practice, no source), plus three standard deviations of the stated noise's
   share ``noise / (sqrt(2) h)``, plus the rounding of a model's value (`ROUNDING`).
3. Verdict.  The columns ``a_k`` are scaled to unit length; each singular value ``s`` of the
   scaled matrix gets the first-order error bar ``d = |u|ᵀ |E| |w|`` of its singular vectors
   (Stewart & Sun 1990, ch. IV), and the eigenvalue ``s²`` of the scaled JᵀJ the bar ``2 s d + d²``.
   MINIMUM: every eigenvalue clear of its bar.  Otherwise the step is changed and the stencil
   measured again (at most ``ATTEMPTS`` stencils): ``GROWTH`` times larger first, and on in the
   direction that shrinks the bars.  A true derivative does not depend on the step, a difference of noise
   falls as it grows: when the noise still hides a direction at the largest step the bounds allow
   (a tenth of the problem's size at most), the verdict is NOISY, with the noise level.  A
   direction below its error bar that is not noise (the bar grows with the step: the residuals'
   own curvature, or only rounding) is not determined by the data: FLAT, with the combination
   named.
4. Large residuals.  The stencil measures the residuals' curvature along each axis,
   ``c_k = (r+ - 2 r0 + r-) / h²``, so the term A along ``e_k`` relative to JᵀJ,
   ``q_k = r0·c_k / |a_k|²``, costs nothing; one more point ``u0 + h v`` along the softest
   direction ``v`` of JᵀJ (its eigenvector of the smallest eigenvalue; where several lie within a
   factor 2 of it, the diagonal's projection on their span) gives
   ``vᵀ A v = 2 r0·(r(u0 + h v) - r0 - h J v) / h²`` against ``|J v|²`` with the J just measured: to
   first order the smallest eigenvalue of JᵀJ + A is that of JᵀJ moved by exactly this amount.
   Gauss–Newton is a good model of the Hessian where every ``|q|`` is well below 1 (Dennis &
   Schnabel 1983, sec. 10.2: the local rate of Gauss–Newton is governed by the size of
   ``(JᵀJ)⁻¹ A``); above ``LARGE`` (beyond its noise) the stencil and the probe are measured
   again at steps ``GROWTH`` times larger (a real curvature stays, the noise's share of a second
   difference falls as 1/h²) and the smaller ``|q|`` is kept; still above, the result says so
   (``large``), and the caller checks the point with the full numerical Hessian instead.

How saddles are still caught.  JᵀJ is never indefinite, so it alone cannot see a saddle or a
maximum of S: the negative curvature of a saddle lives in A, which must then outweigh JᵀJ in some
direction (``q <= -1`` along it).  Test 4 measures A along every axis and along the direction where
JᵀJ is weakest, the one whose eigenvalue a negative A turns first, and hands such a point to the
full Hessian check (and its escape).  A = [[0, a], [a, 0]] with JᵀJ = I has a zero diagonal and
the eigenvalues ±a: the axes miss it, the probe along the diagonal of that soft plane sees -a.  What
stays unseen is a negative curvature of A along a stiff direction of JᵀJ that does not reach the
softest one or the axes, a point the search's line searches would also have had to pass.

References
----------
.. [1] J. E. Dennis and R. B. Schnabel, *Numerical Methods for Unconstrained Optimization and
   Nonlinear Equations*, Prentice-Hall, 1983, ch. 10 (nonlinear least squares; small- and
   large-residual problems).
.. [2] G. W. Stewart and J.-G. Sun, *Matrix Perturbation Theory*, Academic Press, 1990, ch. IV
   (perturbation of singular values).
.. [3] D. M. Bates and D. G. Watts, *Nonlinear Regression Analysis and Its Applications*, Wiley,
   1988, sec. 2.3 (JᵀJ and the linearized covariance).
"""

from __future__ import annotations

import math
from collections.abc import Generator
from dataclasses import dataclass

import numpy as np

from directional.method.leastsquares import SumOfSquares
from directional.method.space import Space
from directional.records import Batch, Halt, Purpose, Verdict

EPSILON = float(np.finfo(float).eps)
SMALLEST_STEP = EPSILON ** (1.0 / 3.0)  # central differences: truncation h² against rounding eps/h
LARGEST_STEP = 0.1  # no step beyond a tenth of the problem's size (scaled coordinates)
TINIEST_STEP = 1e-9  # a step shrunk below this is lost in the rounding of the point itself
ATTEMPTS = 4  # stencils at most, when the first leaves a combination in doubt
GROWTH = 30.0  # factor between the steps of successive stencils: eps^(1/3) to 0.1 in three
LARGE = 0.25  # |q| beyond this: the residuals' curvature is not negligible against JᵀJ
# A residual is model minus data: its rounding is eps times the model's value, which the
# stencil does not see where model and data cancel.  With the model varying by about its own
# size over the problem's size (scaled coordinates), that is ``eps / h`` of a column: no singular
# value below ROUNDING * eps / h of the largest is trusted (common practice, no source).
ROUNDING = 16.0
GAUSS_NEWTON = "gauss-newton"  # the source a curvature record from this check names


@dataclass(frozen=True, slots=True, kw_only=True)
class Stencil:
    """One central-difference Jacobian along the axes of the free parameters, with error bars.

    ``columns`` is (m, k): the Jacobian's free columns (scaled coordinates); ``error`` the bar of
    each entry; ``noise`` the stated noise's share of it; ``curvature`` (m, k) the residuals'
    second differences ``c_k``; ``steps`` the ``h_k``.
    """

    columns: np.ndarray
    error: np.ndarray
    noise: np.ndarray
    curvature: np.ndarray
    steps: np.ndarray


@dataclass(frozen=True, slots=True, kw_only=True)
class Judged:
    """What the singular values of the column-scaled J say, eigenvalue by eigenvalue of JᵀJ.

    ``eigenvalues`` (ascending) of the column-scaled JᵀJ, ``margins`` their error bars, ``noisy``
    where the stated noise's share is most of the bar, ``directions`` (k, k) the matching unit
    directions in the scaled coordinates of the free parameters (one per column).
    """

    eigenvalues: np.ndarray
    margins: np.ndarray
    noisy: np.ndarray
    directions: np.ndarray

    @property
    def decided(self) -> bool:
        return bool(np.all(self.eigenvalues > self.margins))

    @property
    def doubt(self) -> float:
        """The largest ratio of error bar to eigenvalue (below 1 when decided)."""
        with np.errstate(divide="ignore", invalid="ignore"):
            ratios = np.where(self.eigenvalues > 0.0, self.margins / self.eigenvalues, np.inf)
        return float(np.max(ratios)) if ratios.size else 0.0


@dataclass(frozen=True, slots=True, kw_only=True)
class FitCheck:
    """The check of a least-squares fit at scaled point ``point``.

    ``verdict``: MINIMUM, FLAT, NOISY, or UNCHECKED (an evaluation failed, the run was stopped,
    or every parameter is on a bound; ``note`` says which).  ``jacobian`` is (m, n) in scaled
    coordinates, zero in the columns of parameters on a bound (None when it could not be had);
    ``bound_columns`` (m, n) holds the one-sided columns of the parameters on a bound (zero
    elsewhere).  ``gauss_newton`` and ``error`` are ``2 JᵀJ`` over the free parameters (scaled
    coordinates) and its error bars; ``margin`` the bar of the smallest eigenvalue of the
    column-scaled JᵀJ; ``undetermined`` the directions (scaled, over the free parameters, one per
    column) the verdict found not determined; ``large`` whether the residuals' curvature is not
    negligible (``ratio`` is the largest ``|q|``); ``steps`` the steps of the stencil used;
    ``stencils`` how many were made.
    """

    verdict: Verdict
    point: np.ndarray
    jacobian: np.ndarray | None = None
    bound_columns: np.ndarray | None = None
    gauss_newton: np.ndarray | None = None
    error: np.ndarray | None = None
    margin: float = math.nan
    undetermined: np.ndarray | None = None
    large: bool = False
    ratio: float = math.nan
    steps: np.ndarray | None = None
    stencils: int = 0
    note: str = ""


def residual_noise(noise: float | None, value: float) -> float:
    """The noise of one residual from the noise level of ``S``: ``noise / (2 sqrt(S))``.

    To first order a noise ``e_i`` in each residual moves ``S`` by ``2 r·e``, of standard
    deviation ``2 |r| e`` (independent errors of one size); where ``S`` is nearly zero the
    quadratic term ``|e|²`` leads instead, and the level is ``sqrt(noise)``.  None: no stated
    noise (0; the rounding is in the error bars' gap term).

    >>> residual_noise(1e-6, 25.0)
    1e-07
    """
    if noise is None or not math.isfinite(noise) or noise <= 0.0:
        return 0.0
    return float(noise) / max(2.0 * math.sqrt(max(value, 0.0)), math.sqrt(float(noise)))


def _embedded(d: np.ndarray, free: np.ndarray) -> np.ndarray:
    """A step over the free parameters as a step over all n (zero for the bound ones)."""
    full = np.zeros(free.size)
    full[free] = d
    return full


def central_stencil(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    free: np.ndarray,
    steps: np.ndarray,
    *,
    residual_level: float,
    bound_steps: np.ndarray | None = None,
) -> Generator[Batch, np.ndarray, tuple[Stencil | None, np.ndarray | None]]:
    """Evaluate ``u0 ± h_k e_k`` (and the one-sided points of the bound parameters) as one batch.

    ``bound_steps`` (n, zero for free parameters) are signed steps of the parameters on a bound
    into the interior.  Returns the stencil and the (m, n) one-sided columns of the bound
    parameters (None when there are none); ``(None, None)`` when an evaluation failed.
    """
    n = space.size
    k = int(free.sum())
    offsets = np.zeros((2 * k, n))
    columns = np.flatnonzero(free)
    offsets[np.arange(k), columns] = steps
    offsets[k + np.arange(k), columns] = -steps
    sides = np.flatnonzero(bound_steps) if bound_steps is not None else np.zeros(0, int)
    extra = np.zeros((sides.size, n))
    if sides.size:
        extra[np.arange(sides.size), sides] = bound_steps[sides]
    points = space.to_user(u0 + np.vstack([offsets, extra]))
    values = yield Batch(points=points, purpose=Purpose.JACOBIAN)
    if not np.all(np.isfinite(values)):  # a failed point: its vector is not asked for
        return None, None
    r0 = squares.vector(space.to_user(u0))
    at = [squares.vector(x) for x in points]
    if r0 is None or any(r is None or r.shape != r0.shape for r in at):
        return None, None
    plus, minus = np.column_stack(at[:k]), np.column_stack(at[k : 2 * k])
    second = plus - 2.0 * r0[:, None] + minus
    noise = 3.0 * residual_level / (math.sqrt(2.0) * steps) * np.ones_like(plus)
    rounding = 4.0 * EPSILON * (np.abs(plus) + np.abs(minus) + np.abs(r0)[:, None]) / steps
    stencil = Stencil(
        columns=(plus - minus) / (2.0 * steps),
        error=np.abs(second) / (2.0 * steps) + noise + rounding,
        noise=noise, curvature=second / steps**2, steps=steps.copy(),
    )
    bound = None
    if sides.size:
        bound = np.zeros((r0.size, n))
        for row, j in enumerate(sides):
            bound[:, j] = (at[2 * k + row] - r0) / bound_steps[j]
    return stencil, bound


def judge(stencil: Stencil) -> Judged:
    """Eigenvalues of the column-scaled JᵀJ with their error bars (see the module docstring)."""
    a = stencil.columns
    norms = np.sqrt(np.sum(a**2, axis=0))
    norms = np.where(norms > 0.0, norms, 1.0)
    u, s, wt = np.linalg.svd(a / norms, full_matrices=False)
    ua, wa = np.abs(u), np.abs(wt.T)
    floor = ROUNDING * EPSILON / float(np.min(stencil.steps)) if stencil.steps.size else 0.0
    bars = np.einsum("ik,ij,jk->k", ua, stencil.error / norms, wa) + floor * (s[0] if s.size else 0)
    share = np.einsum("ik,ij,jk->k", ua, stencil.noise / norms, wa)
    order = np.argsort(s)
    s, bars, share, w = s[order], bars[order], share[order], wt.T[:, order]
    directions = w / norms[:, None]
    directions = directions / np.maximum(np.linalg.norm(directions, axis=0), 1e-300)
    return Judged(
        eigenvalues=s**2, margins=2.0 * s * bars + bars**2, noisy=share >= 0.5 * bars,
        directions=directions,
    )


def residual_curvature(stencil: Stencil, r0: np.ndarray, residual_level: float) -> np.ndarray:
    """``|q_k|`` less its noise: the term A against JᵀJ along each axis.

    ``q_k = r0·c_k / |a_k|²`` (module docstring, test 4); the noise of a second difference,
    ``sqrt(6) e / h²`` per residual, moves ``r0·c_k`` by up to ``3 |r0| sqrt(6) e / h²``, which is
    taken off, together with the rounding of the three values.
    """
    a2 = np.sum(stencil.columns**2, axis=0)
    q = np.abs(r0 @ stencil.curvature)
    spread = 3.0 * math.sqrt(6.0) * residual_level + 4.0 * EPSILON * float(np.max(np.abs(r0)))
    q = np.maximum(q - float(np.linalg.norm(r0)) * spread / stencil.steps**2, 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(a2 > 0.0, q / a2, np.where(q > 0.0, np.inf, 0.0))


def softest(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    r0: np.ndarray,
    free: np.ndarray,
    stencil: Stencil,
    residual_level: float,
) -> Generator[Batch, np.ndarray, float | None]:
    """``|q|`` along the softest direction of JᵀJ, less its noise, from one more point.

    ``v`` (unit, scaled coordinates) is the softest direction of the column-scaled JᵀJ
    (`_soft_direction`); the point ``u0 + t v`` with ``t`` the stencil's largest step (the other
    way where a bound is closer).  ``r(u0 + t v) - r0 - t J v = t² vᵀ∇²r v / 2``, so
    ``vᵀ A v = 2 r0·(that) / t²``; the error of ``J v`` times ``t`` and the rounding bound how far
    that can be off.  None when the point failed.
    """
    v = _soft_direction(stencil.columns)
    d = _embedded(v, free)
    lo, hi = space.segment(u0, d)
    t = float(np.max(stencil.steps))
    t = min(t, hi) if hi >= t or hi >= -lo else -min(t, -lo)
    if t == 0.0:
        return 0.0
    values = yield Batch(points=space.to_user(u0 + t * d)[None, :], purpose=Purpose.JACOBIAN)
    r = squares.vector(space.to_user(u0 + t * d)) if np.all(np.isfinite(values)) else None
    if r is None or r.shape != r0.shape:
        return None
    jv = stencil.columns @ v
    left = r - r0 - t * jv
    spread = abs(t) * (stencil.error @ np.abs(v)) + 4.0 * EPSILON * (np.abs(r) + np.abs(r0))
    spread = spread + 3.0 * math.sqrt(3.0) * residual_level  # r, r0 and the stencil's noise
    excess = max(2.0 * (abs(float(r0 @ left)) - float(np.abs(r0) @ spread)), 0.0) / t**2
    a2 = float(jv @ jv)
    return excess / a2 if a2 > 0.0 else (math.inf if excess > 0.0 else 0.0)


def _soft_direction(columns: np.ndarray) -> np.ndarray:
    """The softest direction of JᵀJ, unit in scaled coordinates, for the probe of test 4.

    In the coordinates where J's columns have unit length: the eigenvector of the smallest
    eigenvalue of JᵀJ; where others lie within a factor 2 of it (a soft plane, not one direction)
    the projection of the diagonal ``(1, ..., 1)`` on their span, so that the probe also crosses
    the axes there (a sum of the eigenvectors could fall back on an axis the stencil measured).
    """
    norms = np.sqrt(np.sum(columns**2, axis=0))
    norms = np.where(norms > 0.0, norms, 1.0)
    _, singular, vt = np.linalg.svd(columns / norms, full_matrices=False)
    order = np.argsort(singular)
    span = vt.T[:, order[singular[order] ** 2 <= 2.0 * singular[order[0]] ** 2]]
    diagonal = np.ones(len(norms)) / math.sqrt(len(norms))
    w = span @ (span.T @ diagonal)
    if np.linalg.norm(w) < 0.1:  # the diagonal is nearly orthogonal to the soft span
        w = span[:, 0]
    v = w / norms
    return v / np.linalg.norm(v)


def _room(space: Space, u0: np.ndarray, free: np.ndarray) -> np.ndarray:
    """How far each free axis may go both ways before a bound, capped at LARGEST_STEP."""
    below, above = u0 - space.lower_u, space.upper_u - u0
    return np.minimum(np.minimum(below, above), LARGEST_STEP)[free]


def _bound_steps(space: Space, u0: np.ndarray, free: np.ndarray) -> np.ndarray:
    """Signed one-sided steps into the interior for the parameters on a bound (0 for the free)."""
    below, above = u0 - space.lower_u, space.upper_u - u0
    steps = np.where(above >= below, np.minimum(SMALLEST_STEP, above), -np.minimum(SMALLEST_STEP, below))
    return np.where(free, 0.0, steps)


def check_fit(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    value: float,
    free: np.ndarray,
    *,
    noise: float | None = None,
    steps: np.ndarray | None = None,
) -> Generator[Batch, np.ndarray, FitCheck]:
    """Check the least-squares point ``u0`` (scaled) by JᵀJ: a generator for the driver.

    ``free`` marks the parameters not on a bound; ``noise`` the noise level of ``S`` (None:
    rounding only).  ``steps`` (one per free parameter, scaled coordinates) are the steps of a
    Jacobian the search already made at ``u0`` along the axes: the stencil takes them, so that
    its points that search evaluated come from the driver's cache (a forward-difference Jacobian
    leaves p + 1 new evaluations, a central one 1); None: ``eps^(1/3)``, or larger as the noise
    asks.  See the module docstring for the verdict and the cost.
    """
    hint = steps
    k = int(free.sum())
    r0 = squares.vector(space.to_user(u0))
    if r0 is None:
        return FitCheck(verdict=Verdict.UNCHECKED, point=u0, note="no residual vector at the point")
    if k == 0:  # every parameter on a bound: nothing to differentiate, no verdict
        return FitCheck(verdict=Verdict.UNCHECKED, point=u0, jacobian=np.zeros((r0.size, free.size)))
    room = _room(space, u0, free)
    level = residual_noise(noise, value)
    relative = max(EPSILON, level / max(math.sqrt(max(value, 0.0)), 1e-300) if level else EPSILON)
    if hint is None:
        steps = np.minimum(max(SMALLEST_STEP, relative ** (1.0 / 3.0)), room)
    else:
        steps = np.minimum(np.abs(np.asarray(hint, dtype=float)), room)
    bound_steps = _bound_steps(space, u0, free) if k < free.size else None
    tried: list[tuple[Stencil, Judged]] = []
    bound = None
    factor = GROWTH
    try:
        for attempt in range(ATTEMPTS):
            stencil, columns = yield from central_stencil(
                space, squares, u0, free, steps, residual_level=level,
                bound_steps=bound_steps if attempt == 0 else None,
            )
            if stencil is None:
                return _best(space, u0, free, tried, bound, noise, level, math.nan,
                             stopped="an evaluation of the check's Jacobian failed")
            bound = columns if attempt == 0 else bound
            judged = judge(stencil)
            tried.append((stencil, judged))
            if judged.decided:
                break
            if attempt and judged.doubt > tried[-2][1].doubt:
                factor = 1.0 / GROWTH  # the bars grew with the step: truncation, not noise
                steps = tried[0][0].steps
            new = np.clip(steps * factor, TINIEST_STEP, room)
            if np.allclose(new, steps):
                break
            steps = new
        stencil, judged = min(tried, key=lambda pair: pair[1].doubt)
        ratio = yield from _ratio(space, squares, u0, r0, free, stencil, judged, level)
        wider = np.clip(stencil.steps * GROWTH, TINIEST_STEP, room)
        if ratio > LARGE and len(tried) < ATTEMPTS and not np.allclose(wider, stencil.steps):
            # real curvature does not depend on the step, noise's share of it falls as 1/h²
            stencil, _ = yield from central_stencil(space, squares, u0, free, wider,
                                                    residual_level=level)
            if stencil is not None:
                judged = judge(stencil)
                tried.append((stencil, judged))
                ratio = min(ratio, (yield from _ratio(space, squares, u0, r0, free, stencil,
                                                      judged, level)))
    except Halt as halt:
        return _best(space, u0, free, tried, bound, noise, level, math.nan,
                     stopped=f"the check could not finish: {halt.reason}")
    if math.isnan(ratio):
        return _best(space, u0, free, tried, bound, noise, level, math.nan,
                     stopped="an evaluation of the check's probe failed")
    return _best(space, u0, free, tried, bound, noise, level, ratio)


def _ratio(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    r0: np.ndarray,
    free: np.ndarray,
    stencil: Stencil,
    judged: Judged,
    level: float,
) -> Generator[Batch, np.ndarray, float]:
    """The largest ``|q|`` of a stencil: along the axes, and (where the verdict would be MINIMUM)
    along the softest direction, one more point; nan when that point failed."""
    ratio = float(np.max(residual_curvature(stencil, r0, level)))
    if judged.decided:
        across = yield from softest(space, squares, u0, r0, free, stencil, level)
        ratio = math.nan if across is None else max(ratio, across)
    return ratio


def _unsteady(tried: list[tuple[Stencil, Judged]]) -> bool:
    """Whether a larger step told a different story: noise, not the objective's own shape.

    A true derivative does not depend on the step; a difference of noise falls as the step grows.
    So the doubt falling by half, or a column's length changing by more than a factor 3, from
    the stencil of the smallest steps to that of the largest marks the noise (common practice, no
    source)."""
    if len(tried) < 2:
        return False
    ordered = sorted(tried, key=lambda pair: float(pair[0].steps.max()))
    first, last = ordered[0], ordered[-1]
    if last[1].doubt < 0.5 * first[1].doubt:
        return True
    before = np.linalg.norm(first[0].columns, axis=0)
    after = np.linalg.norm(last[0].columns, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        change = np.maximum(before / after, after / before)
    return bool(np.any(~np.isfinite(change) | (change > 3.0)))


def _best(
    space: Space,
    u0: np.ndarray,
    free: np.ndarray,
    tried: list[tuple[Stencil, Judged]],
    bound: np.ndarray | None,
    noise: float | None,
    level: float,
    ratio: float,
    *,
    stopped: str = "",
) -> FitCheck:
    """The verdict from the most decisive stencil measured (UNCHECKED when there is none)."""
    if not tried:
        return FitCheck(verdict=Verdict.UNCHECKED, point=u0, note=stopped)
    stencil, judged = min(tried, key=lambda pair: pair[1].doubt)
    jacobian = np.zeros((stencil.columns.shape[0], space.size))
    jacobian[:, free] = stencil.columns
    a, e = stencil.columns, stencil.error
    gauss_newton = 2.0 * a.T @ a
    error = 2.0 * (np.abs(a).T @ e + e.T @ np.abs(a))
    verdict = Verdict.MINIMUM
    note = stopped
    doubtful = judged.eigenvalues <= judged.margins
    if stopped:
        verdict = Verdict.UNCHECKED
    elif np.any(doubtful):
        noise_hides = bool(np.any(judged.noisy[doubtful])) or _unsteady(tried)
        verdict = Verdict.NOISY if noise_hides else Verdict.FLAT
        if noise_hides:
            widest = max(tried, key=lambda pair: float(pair[0].steps.max()))[0]
            least = min(tried, key=lambda pair: float(pair[0].steps.max()))[0]  # least truncation
            seen = float(np.sqrt(np.mean((least.curvature * least.steps**2) ** 2) / 6.0))
            what = (f"about {seen:.2g} per residual, from the stencil's second differences"
                    if noise is None else f"noise level {noise:.3g} in S, about {level:.2g} per "
                    "residual")
            note = (
                f"the noise ({what}) hides {int(doubtful.sum())} direction(s) of JᵀJ at every "
                f"step tried, up to {widest.steps.max():.3g} of the problem's size: a lower solver "
                "tolerance, less noisy evaluations or wider bounds would decide it"
            )
    return FitCheck(
        verdict=verdict, point=u0, jacobian=jacobian, bound_columns=bound,
        gauss_newton=gauss_newton, error=error,
        margin=float(judged.margins[0]) if judged.margins.size else math.nan,
        undetermined=judged.directions[:, doubtful] if verdict is not Verdict.MINIMUM else None,
        large=ratio > LARGE, ratio=ratio, steps=stencil.steps, stencils=len(tried), note=note,
    )
