"""Numerical Hessians for the curvature check: step sizes, numdifftools, a plain stencil.

Both measure the Hessian of the objective in scaled coordinates (`directional.method.space`) over the
parameters not on a bound, around the scaled point ``u0``, as generators for the driver: every
stencil point is known before any value is, so each stencil goes out as one batch (purpose
"hessian"), which an executor evaluates in parallel.

- `extrapolated_hessian`: numdifftools' central differences at three steps with Richardson
  extrapolation and its error estimate; 6 n² + 1 evaluations.
- `quick_hessian`: one central-difference stencil and the half steps along the axes (for
  `directional.method.smoothness`), at most 2 n² + 2 n + 1 evaluations; its error bars hold the
  noise's share only.

`step_sizes` chooses the steps from the expected curvatures and the noise level, never below
what the noise allows.  With a stated noise level the steps may grow to `NOISY_LARGEST` (the
problem's size) or the room to the bounds, whichever is smaller: curvature that noise of size
``sigma`` hides at a step ``h`` (about ``sigma / h²``) may show at a larger one (Moré & Wild 2012).
`eigenvalue_noise` is the noise's share of an eigenvalue of the quick stencil's Hessian, and
`truncation` what the stencil's half steps say about its truncation error.

References
----------
.. [1] P. E. Gill, W. Murray and M. H. Wright, *Practical Optimization*, Academic Press, 1981,
   sec. 8.6 (finite-difference intervals balancing truncation against rounding; from memory).
.. [2] P. A. Brodtkorb, numdifftools (Richardson extrapolation of finite differences).
.. [3] J. J. Moré and S. M. Wild, "Estimating derivatives of noisy simulations", *ACM
   Transactions on Mathematical Software* 38(3) (2012), article 19 (difference steps chosen so
   that the difference stands well above the noise while truncation stays small; from memory).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Generator
from dataclasses import dataclass

import numpy as np

from directional.method import differences
from directional.method.differences import RATIO, STEPS
from directional.method.space import Space
from directional.records import Batch, Check, Purpose

EPSILON = float(np.finfo(float).eps)
LARGEST_STEP = 0.1  # no stencil step beyond a tenth of the problem's size (scaled coordinates)
NOISY_LARGEST = 1.0  # with a stated noise level: no step beyond the problem's size
SMALLEST_STEP = EPSILON ** (1.0 / 3.0)  # the points' own rounding stays below 1e-10 of a step
NOISE_SHARE = 0.01  # noise may spoil at most 1 % of a curvature (at 3 sigma) at the smallest step


# ----------------------------------------------------------------------------- steps


def step_sizes(
    curvatures: np.ndarray, value: float, noise: float | None, room: np.ndarray, check: str
) -> np.ndarray:
    """Finite-difference steps (scaled coordinates) for a Hessian at a point with value ``value``.

    ``curvatures`` are the expected second derivatives along the axes (the free estimate's
    diagonal; nan or <= 0 where unknown); ``noise`` the absolute noise level (None: rounding only,
    ``4 eps |f|``); ``room`` the distance to the nearest bound along each axis; ``check`` the
    kind of check the steps are for (`records.Check`).

    A step balances truncation against rounding for a plain central second difference:
    ``h = (e / c)^(1/4)`` with ``e`` the noise (Gill, Murray & Wright 1981, sec. 8.6, from
    memory), but at least ``eps^(1/3)``: where ``f`` is near 0 the rule would shrink the step
    until the rounding of the points themselves (about ``eps`` in scaled coordinates) spoils the
    differences.  The extrapolated check uses the steps ``2h, h, h/2``:
    numdifftools' error estimate is led by the spread of the plain differences, so steps chosen
    for them keep its error bars tight (the extrapolation then only sharpens the estimate).  The
    floor: the noise may spoil at most 1 % of the curvature (3 sigma) at the smallest step, i.e.
    ``h >= sqrt(3 sqrt(6) noise / (0.01 c))`` (the second difference of three values with noise of
    standard deviation ``noise`` has standard deviation ``sqrt(6) noise / h²``).  The floor wins
    over the step rule; the room to the bounds and a tenth of the problem's size (with a stated
    noise level: the problem's size, `NOISY_LARGEST`) win over both.

    >>> step_sizes(np.array([2.0]), 1.0, None, np.array([np.inf]), "quick").round(6)
    array([0.000145])
    """
    level = 4.0 * EPSILON * abs(value) if noise is None else float(noise)
    known = np.isfinite(curvatures) & (curvatures > 0.0)
    fallback = abs(value) if value != 0.0 and math.isfinite(value) else 1.0
    c = np.where(known, curvatures, np.max(curvatures[known]) if known.any() else fallback)
    c = np.asarray(c, dtype=float)
    floor = np.sqrt(3.0 * math.sqrt(6.0) * level / (NOISE_SHARE * c))
    h = np.maximum((level / c) ** 0.25, SMALLEST_STEP)
    largest = LARGEST_STEP if noise is None else NOISY_LARGEST
    if check == Check.QUICK:
        return np.minimum(np.maximum(h, floor), np.minimum(largest, room))
    # steps 2h, h, h/2; numdifftools' diagonal reaches twice the largest step from the point.
    h = np.maximum(h, floor * RATIO ** (STEPS - 2))
    return np.minimum(h * RATIO, np.minimum(largest, 0.5 * room))


def noise_margin(steps: np.ndarray, noise: float) -> np.ndarray:
    """Three standard deviations of the noise's share of each Hessian entry (quick stencil)."""
    outer = np.outer(steps, steps)
    margin = 3.0 * noise / (2.0 * outer)  # (f++ - f+- - f-+ + f--) / (4 h_i h_j)
    np.fill_diagonal(margin, 3.0 * math.sqrt(6.0) * noise / steps**2)
    return margin


def eigenvalue_noise(vectors: np.ndarray, steps: np.ndarray, noise: float) -> np.ndarray:
    """Standard deviation of the noise's share of ``vᵀ H v`` for each column ``v`` of ``vectors``,
    ``H`` measured by `quick_hessian` with ``steps`` from values with independent noise of
    standard deviation ``noise``.

    Derivation (ours): with ``a_i = v_i² / h_i²``, the diagonal part ``Σ v_i² H_ii`` is
    ``Σ a_i (f(+h_i) + f(-h_i)) - 2 f(0) Σ a_i``; every diagonal entry shares ``f(0)``, so its
    variance is ``σ² (2 Σ a_i² + 4 (Σ a_i)²)``.  Each off-diagonal entry
    ``(f++ - f+- - f-+ + f--) / (4 h_i h_j)`` uses four points of its own (variance
    ``σ² / (4 h_i² h_j²)``) and enters twice, ``2 v_i v_j H_ij``: variance ``σ² a_i a_j``.  For a
    unit ``v`` along one axis this is the three-point stencil's ``sqrt(6) σ / h²``; along a
    combination of many axes it falls towards ``2 σ / h²`` (the shared centre dominates).  To first
    order an eigenvalue moves by ``vᵀ E v`` for an error ``E`` (Wilkinson 1965, ch. 2).

    >>> eigenvalue_noise(np.eye(2), np.array([0.1, 0.1]), 1e-3).round(4)
    array([0.2449, 0.2449])
    """
    a = np.asarray(vectors, dtype=float) ** 2 / np.asarray(steps, dtype=float)[:, None] ** 2
    total, squares = np.sum(a, axis=0), np.sum(a * a, axis=0)
    cross = 0.5 * (total * total - squares)  # Σ_{i<j} a_i a_j
    return float(noise) * np.sqrt(2.0 * squares + 4.0 * total * total + cross)


def truncation(spread: np.ndarray, steps: np.ndarray, noise: float) -> np.ndarray:
    """Truncation error of each diagonal entry of `quick_hessian`, where its half steps show one.

    ``spread`` is ``D(h) - D(h/2)`` per axis, ``D(t)`` the second difference at step ``t``.  For a
    smooth function ``D(t) = f'' + a t² + ...``, so ``D(h) - D(h/2) = (3/4) a h²`` and the
    truncation error of ``D(h)`` is ``(4/3)`` of the spread (common practice, no source).  The
    spread is ``Δ⁴ f / h²``, a fourth difference of five values ``h/2`` apart, whose noise has
    standard deviation ``sqrt(70) σ / h²`` (``1 + 16 + 36 + 16 + 1 = 70``); a spread within five
    of those counts as none (at three, one axis in a hundred of a noisy stencil would show
    truncation that is not there, and stop its steps from growing; our choice).
    """
    spread = np.abs(np.asarray(spread, dtype=float))
    steps = np.asarray(steps, dtype=float)
    shown = spread > 5.0 * math.sqrt(70.0) * float(noise) / steps**2
    return np.where(shown, 4.0 / 3.0 * spread, 0.0)


# ----------------------------------------------------------------------------- paid Hessians


@dataclass(frozen=True, slots=True, kw_only=True)
class Measured:
    """A Hessian measured in scaled coordinates over the free parameters, with its error bars."""

    hessian: np.ndarray
    error: np.ndarray
    steps: np.ndarray
    problem: str = ""  # why the measurement is unusable ("" when it is fine)
    spread: np.ndarray | None = None  # quick stencil: D(h) - D(h/2) along each axis
    lines: np.ndarray | None = None  # quick stencil: f at -h, -h/2, 0, h/2, h along each axis


def _embed(space: Space, u0: np.ndarray, free: np.ndarray, v: np.ndarray) -> np.ndarray:
    """User points for steps ``v`` (rows, over the free parameters) from the scaled point u0."""
    u = np.repeat(u0[None, :], len(v), axis=0)
    u[:, free] = u[:, free] + v
    return space.to_user(u)


def extrapolated_hessian(
    space: Space, u0: np.ndarray, free: np.ndarray, steps: np.ndarray
) -> Generator[Batch, np.ndarray, Measured]:
    """numdifftools' Hessian with the stencil evaluated as one batch (purpose "hessian").

    numdifftools calls its function one point at a time.  A first pass with a function that only
    records the points (`differences.Recorder`) collects the stencil; it is evaluated as one
    batch; a second pass reads the values back.  Should the second
    pass ask for a point not recorded, that point is evaluated in a further batch and the pass
    repeated (at most twice).
    """
    table = differences.Recorder(0.0)
    for _ in range(3):
        table.missing = {}
        hessian, error = differences.hessian(table, steps)
        if not table.missing:
            return _checked_measure(hessian, error, steps, table.known)
        values = yield Batch(
            points=_embed(space, u0, free, np.array(list(table.missing.values()))), purpose=Purpose.HESSIAN
        )
        table.known.update(zip(table.missing, (float(v) for v in values)))
        bad = sum(1 for v in values if not math.isfinite(v))
        if bad:
            problem = f"{bad} of the {len(values)} stencil evaluations failed"
            return Measured(hessian=hessian, error=error, steps=steps, problem=problem)
    return Measured(hessian=hessian, error=error, steps=steps, problem="the stencil kept changing")


def _checked_measure(
    hessian: np.ndarray, error: np.ndarray, steps: np.ndarray, known: dict[bytes, float]
) -> Measured:
    bad = sum(1 for v in known.values() if not math.isfinite(v))
    problem = f"{bad} of the {len(known)} stencil evaluations failed" if bad else ""
    if not problem and not (np.all(np.isfinite(hessian)) and np.all(np.isfinite(error))):
        problem = "the Hessian estimate is not finite"
    return Measured(hessian=0.5 * (hessian + hessian.T), error=error, steps=steps, problem=problem)


def quick_hessian(
    space: Space, u0: np.ndarray, free: np.ndarray, steps: np.ndarray
) -> Generator[Batch, np.ndarray, Measured]:
    """A plain central-difference Hessian: one batch of at most 2 k² + 2 k + 1 points (k free).

    ``H_ii = (f(+h_i) - 2 f(0) + f(-h_i)) / h_i²`` and
    ``H_ij = (f(+h_i, +h_j) - f(+h_i, -h_j) - f(-h_i, +h_j) + f(-h_i, -h_j)) / (4 h_i h_j)``
    (common practice, no source).  The batch also holds ``±h_i / 2`` along each axis: unused
    here, they give the smoothness test its second scale.  Its error bars hold the noise's share
    only (`_noise_margin`, added by the caller): a single stencil cannot estimate its own
    truncation error.
    """
    k = len(steps)
    rows = [np.zeros(k)]
    for i in range(k):
        for sign in (1.0, -1.0):
            v = np.zeros(k)
            v[i] = sign * steps[i]
            rows.append(v)
    pairs = [(i, j) for i in range(k) for j in range(i + 1, k)]
    for i, j in pairs:
        for si, sj in ((1.0, 1.0), (1.0, -1.0), (-1.0, 1.0), (-1.0, -1.0)):
            v = np.zeros(k)
            v[i], v[j] = si * steps[i], sj * steps[j]
            rows.append(v)
    for i in range(k):  # half steps along each axis: two scales, for the smoothness test
        for sign in (0.5, -0.5):
            v = np.zeros(k)
            v[i] = sign * steps[i]
            rows.append(v)
    values = yield Batch(points=_embed(space, u0, free, np.array(rows)), purpose=Purpose.HESSIAN)
    known = {row.tobytes(): float(value) for row, value in zip(rows, values)}
    hessian = np.zeros((k, k))
    if not np.all(np.isfinite(values)):
        return _checked_measure(hessian, np.zeros((k, k)), steps, known)  # names the failures
    f0 = values[0]
    half = 1 + 2 * k + 4 * len(pairs)
    spread = np.zeros(k)
    lines = np.array([[values[2 + 2 * i], values[half + 1 + 2 * i], f0, values[half + 2 * i],
                       values[1 + 2 * i]] for i in range(k)])
    for i in range(k):
        hessian[i, i] = (values[1 + 2 * i] - 2.0 * f0 + values[2 + 2 * i]) / steps[i] ** 2
        near = (values[half + 2 * i] - 2.0 * f0 + values[half + 1 + 2 * i]) / (0.5 * steps[i]) ** 2
        spread[i] = hessian[i, i] - near
    for n, (i, j) in enumerate(pairs):
        pp, pm, mp, mm = values[1 + 2 * k + 4 * n : 5 + 2 * k + 4 * n]
        hessian[i, j] = hessian[j, i] = (pp - pm - mp + mm) / (4.0 * steps[i] * steps[j])
    measured = _checked_measure(hessian, np.zeros((k, k)), steps, known)
    return dataclasses.replace(measured, spread=spread, lines=lines)


NOTICE = 100.0  # the stencil looks noisy above this many rounding levels (our choice)
AGREEMENT = 4.0  # sigma_2, sigma_3, sigma_4 within this factor (as in Moré & Wild 2011)


def stencil_noise(lines: np.ndarray) -> float:
    """The noise level the quick stencil's axis lines show, or nan where they look smooth.

    Each line holds five equally spaced values (`quick_hessian`'s ``lines``).  As in the
    difference tables of Moré & Wild (2011), ``sigma_k = sqrt(gamma_k mean((Δ^k f)²))`` with
    ``gamma_k = (k!)² / (2k)!`` estimates the noise once the smooth part of the k-th differences
    has died out; here the orders 2, 3 and 4 of every line are pooled.  The lines look noisy when
    ``sigma_2``, ``sigma_3`` and ``sigma_4`` agree within a factor 4 (for a smooth function they
    fall steeply with the order at steps this small), ``sigma_4`` exceeds ``NOTICE`` times the
    rounding of the values (``4 eps max |f|``), and every line on its own shows at least a tenth
    of the level (a kink or a jump along some axes shows only on those), and the odd parts of
    the lines, linear for a kink at the point, show it too.  A kink beside the point along every
    axis may still pass; the caller tells it from noise at larger steps.  The level returned is the
    root mean square of the three orders.

    >>> rng = np.random.default_rng(0)
    >>> 0.3 < stencil_noise(1.0 + 1e-3 * rng.standard_normal((3, 5))) / 1e-3 < 3.0
    True
    >>> math.isnan(stencil_noise(np.array([[1.0, 1.0 + 1e-9, 1.0 + 4e-9, 1.0 + 9e-9, 1.0 + 16e-9]])))
    True
    """
    lines = np.asarray(lines, dtype=float)
    if lines.size == 0 or not np.all(np.isfinite(lines)) or not np.any(lines):
        return math.nan
    size = float(np.max(np.abs(lines)))
    lines = lines / size  # values near 1e300 would overflow when squared
    rounding = 4.0 * EPSILON
    gamma = {2: 4.0 / 24.0, 3: 36.0 / 720.0, 4: 576.0 / 40320.0}
    sigma = {k: math.sqrt(gamma[k] * float(np.mean(np.diff(lines, n=k, axis=1) ** 2))) for k in gamma}
    if sigma[4] <= NOTICE * rounding or max(sigma.values()) > AGREEMENT * min(sigma.values()):
        return math.nan
    each = np.sqrt(np.mean(np.concatenate(
        [gamma[k] * np.diff(lines, n=k, axis=1) ** 2 for k in gamma], axis=1), axis=1))
    if np.any(each < 0.1 * sigma[4]):
        return math.nan
    # the odd part o(t) = (f(t) - f(-t)) / 2 is linear in t for a kink or a corner at the point
    # (and nearly so for a smooth function): o(h) - 2 o(h/2) vanishes there, while for noise it
    # has standard deviation sqrt(1/2 + 4/2) sigma
    odd = (lines[:, 4] - lines[:, 0]) / 2.0 - (lines[:, 3] - lines[:, 1])
    if math.sqrt(float(np.mean(odd**2)) / 2.5) < 0.1 * sigma[4]:
        return math.nan
    return size * math.sqrt(sum(v * v for v in sigma.values()) / 3.0)  # the orders pooled


def fourth_noise(lines: np.ndarray) -> float:
    """``sigma_4`` of the axis lines alone: the noise level their fourth differences show."""
    fourth = np.diff(np.asarray(lines, dtype=float), n=4, axis=1)
    size = float(np.max(np.abs(fourth))) if fourth.size else 0.0
    if size == 0.0 or not math.isfinite(size):
        return size
    return size * math.sqrt(float(np.mean((fourth / size) ** 2)) / 70.0)
