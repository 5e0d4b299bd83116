"""Minimum along a line: bracketing, then safeguarded successive parabolic interpolation.

Theory of operation.  The search is a generator over the line parameter ``t``: it yields arrays of
``t`` values to evaluate and receives their objective values (``+inf`` for a failed evaluation).
All points it has seen are kept, sorted, so the bracket around the best point is always its two
evaluated neighbours.

1. Probe.  From the known points (at least the base point ``t = 0``), one step of the size the
   caller suggests, to both sides at once (one batch) when the curvature is unknown and the
   segment has room.  When the curvature ``c`` along this line is known from an earlier search,
   the parabola through the two points with second derivative ``c`` gives the next point directly:
   on a quadratic that point is the minimum, found with two evaluations (the idea of reusing the
   measured second derivative is Brent's, 1973 ch. 7).
2. Bracket.  While the best point is the outermost one, step further downhill: to the vertex of
   the parabola through the last three points when it lies ahead, else by the golden ratio, never
   more than ``growth`` times the last step, and never past the end of the feasible segment.  A
   best point at an end of the segment is accepted when the function rises inward there.
3. Refine.  Brent's (1973, ch. 5) safeguarded iteration: the vertex of the parabola through the
   three best points (Jarratt 1967; order of convergence 1.3247) is accepted only when the
   parabola opens upward, the vertex lies inside the bracket and the step is shorter than half the
   step before last; otherwise a golden-section step into the larger part of the bracket.  No
   point is evaluated twice, and no two points lie closer than the tolerance.

Stopping: in ``exact`` mode (the public `line_minimum`) when the bracket is within the tolerance,
as in Brent's procedure.  Inside the direction-set search, as soon as the parabola through the
three best points puts its vertex within the tolerance of the best point: the next step would be
below the tolerance, so it is not taken (this is what makes a line search on a quadratic cost two
new evaluations).

References
----------
.. [1] R. P. Brent, *Algorithms for Minimization without Derivatives*, Prentice-Hall, 1973, ch. 5
   and 7.
.. [2] P. Jarratt, "An iterative method for locating turning points", *Computer Journal* 10
   (1967) 82-84.
"""

from __future__ import annotations

import math
from collections.abc import Generator, Iterable
from dataclasses import dataclass

import numpy as np

GOLDEN = 0.5 * (3.0 - math.sqrt(5.0))  # 0.381966..., the golden-section fraction (Kiefer 1953)
EXPAND = 0.5 * (1.0 + math.sqrt(5.0))  # 1.618..., growth of a plain bracketing step
EPSILON = float(np.finfo(float).eps)


@dataclass(frozen=True, slots=True, kw_only=True)
class LineResult:
    """The best point found along a line.

    ``bracket`` holds the evaluated neighbours of ``point`` (or ``point`` itself at an end of the
    segment); ``curvature`` is the second derivative of the parabola through the three best points,
    ``nan`` when it could not be measured.
    """

    point: float
    value: float
    bracket: tuple[float, float]
    curvature: float
    evaluations: int


LineSearch = Generator[np.ndarray, np.ndarray, LineResult]


def parabola(t: Iterable[float], f: Iterable[float]) -> tuple[float, float]:
    """Vertex and second derivative of the parabola through three points.

    Returns ``(nan, nan)`` when the points are not distinct or a value is not finite.  The vertex is
    written relative to the first point, as in Brent (1973, ch. 5), to limit cancellation.

    >>> parabola([0.0, 1.0, 3.0], [4.0, 1.0, 1.0])
    (2.0, 2.0)
    """
    (x, w, v), (fx, fw, fv) = tuple(t), tuple(f)
    if not (math.isfinite(fx) and math.isfinite(fw) and math.isfinite(fv)):
        return math.nan, math.nan
    if x == w or x == v or w == v:
        return math.nan, math.nan
    r = (x - w) * (fx - fv)
    q = (x - v) * (fx - fw)
    p = (x - v) * q - (x - w) * r
    q = 2.0 * (q - r)
    curvature = 2.0 * ((fw - fx) / (w - x) - (fv - fx) / (v - x)) / (w - v)
    if q == 0.0:
        return math.nan, curvature
    return x - p / q, curvature


def line_search(
    known: dict[float, float],
    lower: float,
    upper: float,
    *,
    step: float,
    tolerance: float,
    relative: float = 0.0,
    curvature: float = math.nan,
    start: float = 0.0,
    growth: float = 100.0,
    limit: int = 60,
    exact: bool = False,
    parabolic: bool = True,
) -> LineSearch:
    """Search ``[lower, upper]`` for a minimum, as a generator (see the module docstring).

    ``known`` maps ``t`` to already-known values (the base point, usually); when it is empty,
    ``start`` is evaluated first.  ``tolerance + relative * |t|`` is the resolution in ``t``.
    ``limit`` caps the evaluations this line search spends.  ``parabolic=False`` turns every
    parabolic step into a golden-section one (an ablation for the benchmarks, not for users).
    """
    points = {float(t): float(v) for t, v in known.items()}
    spent = 0

    def tol(t: float) -> float:
        return tolerance + relative * abs(t)

    def fresh(t: float) -> bool:
        return all(abs(t - s) >= 0.5 * tol(t) for s in points)

    if not points:
        values = yield np.array([start])
        points[float(start)] = float(values[0])
        spent += 1
    if len(points) == 1:
        (t0, f0), = points.items()
        t1 = _probe(t0, lower, upper, abs(step), tol(t0))
        if t1 is None:
            return _result(points, t0, spent)
        t_back = 2.0 * t0 - t1
        if not (parabolic and curvature > 0.0) and lower <= t_back <= upper and spent + 2 <= limit:
            # No curvature known: probe both sides at once (one batch, so the two evaluations
            # can run in parallel); the parabola through the three points is the next step.
            values = yield np.array([t1, t_back])
            points[t1], points[t_back] = float(values[0]), float(values[1])
            spent += 2
        else:
            values = yield np.array([t1])
            points[t1] = float(values[0])
            spent += 1
        f1 = points[t1]
        if parabolic and curvature > 0.0 and math.isfinite(f1) and math.isfinite(f0):
            vertex = 0.5 * (t0 + t1) - (f1 - f0) / (t1 - t0) / curvature
            reach = growth * abs(t1 - t0)
            t2 = min(max(vertex, lower, t0 - reach), upper, t0 + reach)
            if not fresh(t2):  # the model puts the minimum on a point already known
                return _result(points, None, spent)
            values = yield np.array([t2])
            points[t2] = float(values[0])
            spent += 1

    last = before_last = math.inf  # Brent's d and e: the last step and the one before
    while spent < limit:
        ts = sorted(points)
        fs = [points[t] for t in ts]
        i = _best(ts, fs)
        x = ts[i]
        tx = tol(x)
        vertex, c = _model(points, x) if parabolic else (math.nan, math.nan)
        if not exact and c > 0.0 and abs(vertex - x) <= tx:
            break
        left = ts[i - 1] if i > 0 else None
        right = ts[i + 1] if i + 1 < len(ts) else None
        at_lower, at_upper = x - lower <= tx, upper - x <= tx
        if right is None and not at_upper:
            u = _extend(ts, fs, i, +1, upper, growth, parabolic)
        elif left is None and not at_lower:
            u = _extend(ts, fs, i, -1, lower, growth, parabolic)
        else:
            a = x if left is None else left
            b = x if right is None else right
            if _rises_inward(x, vertex, c, a, b, tx):
                break
            if _indistinct(points, a, x, b):
                break
            m = 0.5 * (a + b)
            if abs(x - m) <= 2.0 * tx - 0.5 * (b - a) or (not parabolic and b - a <= 4.0 * tx):
                break
            u, last, before_last = _brent_step(
                points, x, a, b, tx, last, before_last, parabolic
            )
        if not fresh(u):
            break
        values = yield np.array([u])
        points[u] = float(values[0])
        spent += 1
    return _result(points, None, spent)


def _best(ts: list[float], fs: list[float]) -> int:
    """Index of the lowest value; among equal values the point nearest the base ``t = 0``, so that
    a flat stretch is never mistaken for a descent."""
    return min(range(len(ts)), key=lambda k: (fs[k], abs(ts[k])))


def _probe(t0: float, lower: float, upper: float, step: float, tol: float) -> float | None:
    """First probe from a single known point: forward if there is room, else backward."""
    step = max(step, 2.0 * tol)
    if upper - t0 > tol:
        return min(t0 + step, upper)
    if t0 - lower > tol:
        return max(t0 - step, lower)
    return None


def _model(points: dict[float, float], x: float) -> tuple[float, float]:
    """Vertex and curvature of the parabola through the best point and the next two best."""
    finite = sorted((f, t) for t, f in points.items() if math.isfinite(f))
    if len(finite) < 3:
        return math.nan, math.nan
    (fx, tx), (fw, tw), (fv, tv) = finite[:3]
    return parabola([tx, tw, tv], [fx, fw, fv])


def _extend(
    ts: list[float], fs: list[float], i: int, sign: int, end: float, growth: float, parabolic: bool
) -> float:
    """Next bracketing point beyond the outermost best point ``ts[i]``, towards ``end``."""
    x = ts[i]
    back = ts[i - sign]
    stride = abs(x - back)
    guess = x + sign * EXPAND * stride
    if parabolic and 0 <= i - 2 * sign < len(ts):
        far = ts[i - 2 * sign]
        vertex, c = parabola([x, back, far], [fs[i], fs[i - sign], fs[i - 2 * sign]])
        if c > 0.0 and sign * (vertex - x) > 0.0:
            guess = vertex if sign * (vertex - x) > 0.1 * stride else x + sign * stride
    reach = x + sign * growth * stride
    guess = min(guess, reach) if sign > 0 else max(guess, reach)
    return min(guess, end) if sign > 0 else max(guess, end)


def _indistinct(points: dict[float, float], a: float, x: float, b: float) -> bool:
    """True when the bracket's values differ from the best by rounding only: no information is
    left to refine with (the resolution limit of Brent 1973, ch. 5, sec. 5.4)."""
    fx = points[x]
    floor = 16.0 * EPSILON * abs(fx) + 1e-300
    sides = [points[t] for t in (a, b) if t != x]
    return bool(sides) and all(abs(f - fx) <= floor for f in sides)


def _rises_inward(x: float, vertex: float, c: float, a: float, b: float, tol: float) -> bool:
    """A best point at a segment end (one side of the bracket is ``x`` itself) with no interior
    minimum predicted between it and its neighbour."""
    if a != x and b != x:
        return False
    inner = b if a == x else a
    inside = c > 0.0 and min(x, inner) + tol < vertex < max(x, inner) - tol
    return not inside


def _brent_step(
    points: dict[float, float],
    x: float,
    a: float,
    b: float,
    tol: float,
    last: float,
    before: float,
    parabolic: bool = True,
) -> tuple[float, float, float]:
    """One step of Brent's (1973, ch. 5) safeguarded iteration inside ``[a, b]``.

    Returns the new point and the updated last and before-last step lengths.
    """
    m = 0.5 * (a + b)
    vertex, c = _model(points, x) if parabolic else (math.nan, math.nan)
    if abs(before) > tol and c > 0.0 and math.isfinite(vertex):
        step = vertex - x
        if abs(step) < 0.5 * abs(before) and a < vertex < b:
            if vertex - a < 2.0 * tol or b - vertex < 2.0 * tol:
                step = tol if m > x else -tol
            elif abs(step) < tol:
                step = tol if step > 0 else -tol
            return x + step, step, last
    span = (a - x) if x >= m else (b - x)
    step = GOLDEN * span
    if abs(step) < tol:
        step = tol if step > 0 else -tol
    return x + step, step, span


def _result(points: dict[float, float], x: float | None, spent: int) -> LineResult:
    ts = sorted(points)
    fs = [points[t] for t in ts]
    i = ts.index(x) if x is not None else _best(ts, fs)
    _, c = _model(points, ts[i])
    lo = ts[i - 1] if i > 0 else ts[i]
    hi = ts[i + 1] if i + 1 < len(ts) else ts[i]
    return LineResult(point=ts[i], value=fs[i], bracket=(lo, hi), curvature=c, evaluations=spent)
