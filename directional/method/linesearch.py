"""Minimum along a line: bracketing, then safeguarded successive parabolic interpolation.

Theory of operation.  The search is a generator over the line parameter ``t``: it yields arrays of
``t`` values to evaluate and receives their objective values (``+inf`` for a failed evaluation).
All points it has seen are kept, sorted, so the bracket around the best point is always its two
evaluated neighbours.  `line_search_floats` is the same generator on lists of plain floats and
returns a tuple (`Found`): the direction-set search runs that one, without a numpy array per
point and a record per line.

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

Noise.  Given the standard deviation ``noise`` of the values (the direction-set search passes
the level once it has noticed one), the line search averages instead of interpolating: probes
that change the value by less than three noise levels are repeated ten times farther out; its
parabola is the least-squares one through up to ``FITTED`` points nearest the best (Conn,
Scheinberg & Vicente 2009, ch. 4, regression in one variable), a bracket whose sides differ
from the best by less than two noise levels is not refined (the values say nothing more), and
the point returned is the evaluated one lowest on that parabola, not the lowest single value
(which is biased low by the noise).

Before any level is known, a line whose own points scatter like noise stops refining: once
``noise.LINE_POINTS`` of them agree in value, their difference table (`noise.line_level`, Moré
& Wild 2011 on unequally spaced points) is read after each evaluation, and a level found ends
the search and is returned (``LineResult.heard``): Brent's iteration would otherwise chase the
noise to the tolerance.  The caller passes such a level back as ``heard`` to later line
searches, which then resolve no finer than a quarter of it (neither in ``t``, where the
parabola changes by that much, nor in value).

Stopping: in ``exact`` mode (the public `line_minimum`) when the bracket is within the tolerance,
as in Brent's procedure.  Inside the direction-set search, as soon as the parabola through the
three best points puts its vertex within the tolerance of the best point: the next step would be
below the tolerance, so it is not taken (this is what makes a line search on a quadratic cost two
new evaluations).  Also, given ``worth`` (the least decrease the caller can still use), as soon
as the parabola promises less than that below the best value: with a known curvature this can be
right after the first probe, so that a line costs one evaluation.  Conversely, given ``ample``
(a decrease the caller would not leave behind), a vertex closer to the best point than the
resolution is still evaluated when its parabola promises more than that: the resolution is a
length, and a valley narrower than it can hold most of the decrease (along the first variable
of Powell's badly scaled function, Moré, Garbow & Hillstrom 1981, no. 3, the valley is about
1e-5 wide, a hundredth of the resolution the direction-set search works to after its first
cycle).

References
----------
.. [1] R. P. Brent, *Algorithms for Minimization without Derivatives*, Prentice-Hall, 1973, ch. 5
   and 7.
.. [2] P. Jarratt, "An iterative method for locating turning points", *Computer Journal* 10
   (1967) 82-84.
.. [3] A. R. Conn, K. Scheinberg and L. N. Vicente, *Introduction to Derivative-Free
   Optimization*, SIAM, 2009, ch. 4.
.. [4] J. J. Moré and S. M. Wild, "Estimating computational noise", *SIAM Journal on Scientific
   Computing* 33(3) (2011) 1292-1314.
"""

from __future__ import annotations

import math
from collections.abc import Generator, Iterable
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np

from directional.method.noise import LINE_POINTS, line_level

GOLDEN = 0.5 * (3.0 - math.sqrt(5.0))  # 0.381966..., the golden-section fraction (Kiefer 1953)
EXPAND = 0.5 * (1.0 + math.sqrt(5.0))  # 1.618..., growth of a plain bracketing step
EPSILON = float(np.finfo(float).eps)
FITTED = 5  # a noisy line's parabola is fitted to this many points nearest the best (at least 4)
HEARD = 3.0  # a noisy probe tells something when it changes the value by this many noise levels
WIDEN = 10.0  # an unheard noisy probe is repeated this many times farther out
assert LINE_POINTS > 3  # `_settled`: three points never make a line's own table


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
    heard: float = math.nan  # the noise level the line's own points showed (`noise.line_level`)


LineSearch = Generator[np.ndarray, np.ndarray, LineResult]


class Found(NamedTuple):
    """`LineResult` as a plain tuple, what `line_search_floats` returns: the search ends a line
    search every two evaluations or so, and a named tuple takes a fraction of the frozen record's
    time to make (about 0.3 against 1 µs, measured on a loaded machine)."""

    point: float
    value: float
    lower: float  # the bracket
    upper: float
    curvature: float
    evaluations: int
    heard: float = math.nan

    def result(self) -> LineResult:
        """The public record of the same result."""
        return LineResult(
            point=self.point, value=self.value, bracket=(self.lower, self.upper),
            curvature=self.curvature, evaluations=self.evaluations, heard=self.heard,
        )


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
    return _vertex(x, w, v, fx, fw, fv)


def _vertex(x: float, w: float, v: float, fx: float, fw: float, fv: float) -> tuple[float, float]:
    """`parabola` of finite values, from plain floats (the line search's inner loop)."""
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
    known: dict[float, float], lower: float, upper: float, **options: Any
) -> LineSearch:
    """Search ``[lower, upper]`` for a minimum, as a generator (see the module docstring).

    ``known`` maps ``t`` to already-known values (the base point, usually); the keywords are
    `line_search_floats`'s (``step`` and ``tolerance`` required).  It yields arrays of ``t``,
    receives arrays of values and returns a `LineResult`: `line_search_floats` on numpy arrays.
    """
    if "start" in options:
        options["start"] = float(options["start"])
    search = line_search_floats(
        {float(t): float(v) for t, v in known.items()}, float(lower), float(upper), **options
    )
    try:
        ts = next(search)
        while True:
            values = yield np.array(ts)
            ts = search.send([float(v) for v in values])
    except StopIteration as stop:
        found: Found = stop.value
    return found.result()


def line_search_floats(
    points: dict[float, float],
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
    noise: float = 0.0,
    heard: float = 0.0,
    listen: bool = True,
    worth: float = 0.0,
    ample: float = 0.0,
    finest: float = 0.0,
) -> Generator[list[float], list[float], Found]:
    """Search ``[lower, upper]`` for a minimum on plain floats: yields lists of ``t``, receives
    lists of their values (as Python floats) and returns a `Found`.  The direction-set search
    runs this one (a numpy array per point and a record per line cost more than the arithmetic);
    `line_search` is the same search on numpy arrays.

    ``points`` (``t`` to value, floats; the base point, usually) is taken over and filled with
    every point evaluated; when it is empty, ``start`` is evaluated first.  ``tolerance +
    relative * |t|`` is the resolution in ``t``.  ``limit`` caps the evaluations this line search
    spends.  ``parabolic=False`` turns every parabolic step into a golden-section one (an
    ablation for the benchmarks, not for users).  ``noise`` (the values' standard deviation, 0
    for rounding only) makes the parabolas least-squares fits and the returned point the lowest
    on the fitted parabola.  ``heard`` (a level an earlier line's points showed; 0 for none) only
    limits the resolution; ``listen`` False leaves the line's own table unread (the caller said
    the values have no noise).  ``worth`` (without noise; 0 for none) is the least decrease worth
    another evaluation: the search stops when its parabola promises less.  ``ample`` (without
    noise; 0 for none) is a decrease the resolution may not hide: a vertex within the resolution
    of the best point whose parabola promises more than ``ample`` below it is evaluated all the
    same, unless it lies within ``finest / 2`` of a point already evaluated.
    """
    spent = 0
    if not points:
        values = yield [start]
        points[start] = values[0]
        spent += 1
    if len(points) == 1:
        (t0, f0), = points.items()
        t1 = _probe(t0, lower, upper, abs(step), tolerance + relative * abs(t0))
        if t1 is None:
            return _result(points, t0, spent, noise)
        t_back = 2.0 * t0 - t1
        if not (parabolic and curvature > 0.0) and lower <= t_back <= upper and spent + 2 <= limit:
            # No curvature known: probe both sides at once (one batch, so the two evaluations
            # can run in parallel); the parabola through the three points is the next step.
            values = yield [t1, t_back]
            points[t1], points[t_back] = values[0], values[1]
            spent += 2
        else:
            values = yield [t1]
            points[t1] = values[0]
            spent += 1
        widened = False
        while noise > 0.0 and spent + 2 <= limit and _unheard(points, t0, noise):
            # the probes changed the value by less than the noise: they cannot tell where the
            # line goes down; go ten times as far to both sides (within the segment)
            reach = WIDEN * max(abs(t - t0) for t in points)
            wider = sorted({min(t0 + reach, upper), max(t0 - reach, lower)} - set(points))
            if not wider:
                break
            values = yield wider
            points.update(zip(wider, values))
            spent += len(wider)
            widened = True
        f1 = points[t1]
        if widened:
            pass  # the least-squares loop below takes over from the wide probes
        elif parabolic and curvature > 0.0 and math.isfinite(f1) and math.isfinite(f0):
            vertex = 0.5 * (t0 + t1) - (f1 - f0) / (t1 - t0) / curvature
            reach = growth * abs(t1 - t0)
            t2 = min(max(vertex, lower, t0 - reach), upper, t0 + reach)
            if not _fresh(points, t2, 0.5 * (tolerance + relative * abs(t2))):
                return _result(points, None, spent, noise)  # the model puts the minimum on a known point
            if worth > 0.0 and noise == 0.0 and _promise(t0, f0, t1, f1, curvature) <= worth:
                return _result(points, None, spent)  # the probe is as good as the caller needs
            values = yield [t2]
            points[t2] = f2 = values[0]
            spent += 1
            if noise == 0.0 and not exact and spent < limit and len(points) == 3:
                # the loop's first verdict, on the three points as they are (the usual end of
                # a line along which the curvature was known)
                found = _settled(
                    t0, f0, t1, f1, t2, f2, tolerance, relative, heard, worth, ample, spent
                )
                if found is not None:
                    return found

    last = before_last = math.inf  # Brent's d and e: the last step and the one before
    while spent < limit:
        if listen and noise == 0.0 and not exact and len(points) >= LINE_POINTS:
            level = line_level(points)
            if math.isfinite(level):  # the values scatter like noise: refining chases it
                return _result(points, None, spent)._replace(heard=level)
        ts = sorted(points)
        fs = [points[t] for t in ts]
        i = _best(ts, fs)
        x = ts[i]
        tx = tolerance + relative * abs(x)
        if not parabolic:
            vertex, c = math.nan, math.nan
        elif noise == 0.0 and math.isfinite(sum(fs)):  # `_model`, every value finite
            vertex, c = _lowest_parabola(ts, fs)
        else:
            vertex, c = _model(points, x, noise)
        if heard > 0.0 and c > 0.0:  # no finer than a change of a quarter of the level
            tx = max(tx, math.sqrt(0.5 * heard / c))
        if (
            ample > 0.0 and noise == 0.0 and heard == 0.0 and c > 0.0 and abs(vertex - x) <= tx
            and 0.5 * c * (vertex - x) ** 2 > ample and lower <= vertex <= upper
            and all(abs(vertex - t) > 0.5 * finest for t in points)
        ):
            # the vertex lies within the resolution, but the parabola promises more there than
            # the caller's ``ample``: the resolution hides a narrow valley; evaluate the vertex
            values = yield [vertex]
            points[vertex] = values[0]
            spent += 1
            continue
        if not exact and c > 0.0 and (
            abs(vertex - x) <= tx or (noise == 0.0 and 0.5 * c * (vertex - x) ** 2 <= worth)
        ):
            if noise == 0.0:  # what `_result` would find again: the best point and its c
                return _found(ts, fs, i, c, spent)
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
            if _indistinct(points, a, x, b, max(noise, heard)):
                break
            m = 0.5 * (a + b)
            if abs(x - m) <= 2.0 * tx - 0.5 * (b - a) or (not parabolic and b - a <= 4.0 * tx):
                break
            u, last, before_last = _brent_step(x, a, b, tx, last, before_last, vertex, c)
        if not _fresh(points, u, 0.5 * (tolerance + relative * abs(u))):
            break
        values = yield [u]
        points[u] = values[0]
        spent += 1
    return _result(points, None, spent, noise)


def _settled(
    t0: float, f0: float, t1: float, f1: float, t2: float, f2: float,
    tolerance: float, relative: float, heard: float, worth: float, ample: float, spent: int,
) -> Found | None:
    """What the refining loop's first pass returns on exactly these three points (without noise,
    parabolic, not exact) when it stops there at once: the lowest, with the parabola through the
    three putting its vertex within the resolution or promising no more than ``worth``.  None
    when the loop has to decide: it goes on, or a value is not finite, or two are equal (ties,
    which the loop breaks by the distance from the base, or a vertex within the resolution that
    promises more than ``ample``, which the loop may evaluate)."""
    if not (math.isfinite(f0 + f1 + f2) and f0 != f1 and f1 != f2 and f0 != f2):
        return None
    # sorted by value, as `_lowest_parabola` sorts them (the values differ)
    (fx, x), (fw, w), (fv, v) = sorted(((f0, t0), (f1, t1), (f2, t2)))
    vertex, c = _vertex(x, w, v, fx, fw, fv)
    if not c > 0.0:
        return None
    tx = tolerance + relative * abs(x)
    if heard > 0.0:  # no finer than a change of a quarter of the level
        tx = max(tx, math.sqrt(0.5 * heard / c))
    if not (abs(vertex - x) <= tx or 0.5 * c * (vertex - x) ** 2 <= worth):
        return None
    if ample > 0.0 and heard == 0.0 and 0.5 * c * (vertex - x) ** 2 > ample:
        return None
    # the bracket: the evaluated neighbours of x (x itself at an end), as `_found` takes them
    if w < x:
        lo = max(w, v) if v < x else w
    else:
        lo = v if v < x else x
    if w > x:
        hi = min(w, v) if v > x else w
    else:
        hi = v if v > x else x
    return Found(x, fx, lo, hi, c, spent)


def _fresh(points: dict[float, float], t: float, half: float) -> bool:
    """Whether ``t`` lies at least ``half`` (half the resolution there) from every known point."""
    for s in points:
        if not abs(t - s) >= half:
            return False
    return True


def _promise(t0: float, f0: float, t1: float, f1: float, curvature: float) -> float:
    """How far below the lower of two values the parabola through them with the given second
    derivative reaches: the decrease its vertex promises."""
    slope = (f1 - f0) / (t1 - t0) - 0.5 * curvature * (t1 - t0)  # the parabola's slope at t0
    return min(f0, f1) - (f0 - 0.5 * slope * slope / curvature)


def _unheard(points: dict[float, float], t0: float, noise: float) -> bool:
    """True when no probe yet reaches beyond the noise: the two outermost probes differ by less
    than `HEARD` noise levels (no slope heard), and their mean exceeds the base value by less
    than twice that (no curvature heard; the base value may be a low one the noise picked
    out, hence the wider margin)."""
    finite = sorted(t for t, f in points.items() if math.isfinite(f) and t != t0)
    if not finite:
        return False
    low, high = points[finite[0]], points[finite[-1]]
    return abs(high - low) < HEARD * noise and 0.5 * (low + high) - points[t0] < 2 * HEARD * noise


def _best(ts: list[float], fs: list[float]) -> int:
    """Index of the lowest value; among equal values the point nearest the base ``t = 0``, so that
    a flat stretch is never mistaken for a descent."""
    lowest = min(fs)
    if fs.count(lowest) == 1:  # no tie (and not nan, which equals nothing): the one index
        return fs.index(lowest)
    # the index breaks no tie the key leaves (equal keys: the first, as min with a key keeps)
    return min(zip(fs, map(abs, ts), range(len(ts))))[2]


def _probe(t0: float, lower: float, upper: float, step: float, tol: float) -> float | None:
    """First probe from a single known point: forward if there is room, else backward."""
    step = max(step, 2.0 * tol)
    if upper - t0 > tol:
        return min(t0 + step, upper)
    if t0 - lower > tol:
        return max(t0 - step, lower)
    return None


def _model(points: dict[float, float], x: float, noise: float = 0.0) -> tuple[float, float]:
    """Vertex and curvature of the parabola through the best point and the next two best; with
    noise, of the least-squares parabola through the points nearest ``x`` (`fitted_parabola`)."""
    if noise > 0.0:
        fitted = fitted_parabola(points, x)
        if fitted is not None:
            return fitted[0], fitted[1]
    finite = sorted([(f, t) for t, f in points.items() if math.isfinite(f)])
    if len(finite) < 3:
        return math.nan, math.nan
    (fx, tx), (fw, tw), (fv, tv) = finite[:3]
    return _vertex(tx, tw, tv, fx, fw, fv)


def _lowest_parabola(ts: list[float], fs: list[float]) -> tuple[float, float]:
    """`_model` without noise, of finite values ``fs`` at the sorted points ``ts``: the parabola
    through the three lowest (the same order of (value, t) pairs, so the same three)."""
    if len(ts) < 3:
        return math.nan, math.nan
    (fx, tx), (fw, tw), (fv, tv) = sorted(zip(fs, ts))[:3]
    return _vertex(tx, tw, tv, fx, fw, fv)


def fitted_parabola(
    points: dict[float, float], x: float, count: int = FITTED
) -> tuple[float, float, np.ndarray] | None:
    """Vertex, curvature and coefficients of the least-squares parabola through the ``count``
    finite points nearest ``x`` (in ``t``); None with fewer than four such points.

    Regression rather than interpolation: with noisy values, a parabola through three points
    takes the noise for curvature, one fitted to more points averages it (Conn, Scheinberg &
    Vicente 2009, ch. 4).  The coefficients are those of ``numpy.polyfit`` in ``t - x``.

    >>> vertex, curvature, _ = fitted_parabola({-2.0: 4.0, -1.0: 1.0, 0.0: 0.0, 1.0: 1.0, 2.0: 4.0}, 0.0)
    >>> round(vertex, 12) + 0.0, round(curvature, 12)
    (0.0, 2.0)
    """
    finite = sorted((abs(t - x), t) for t, f in points.items() if math.isfinite(f))[:count]
    if len(finite) < 4:
        return None
    ts = np.array([t for _, t in finite])
    fs = np.array([points[t] for t in ts])
    span = float(np.max(np.abs(ts - x)))
    if not span > 0.0:
        return None
    scaled = np.polyfit((ts - x) / span, fs, 2)
    coefficients = scaled / np.array([span**2, span, 1.0])
    a, b = float(coefficients[0]), float(coefficients[1])
    vertex = x - b / (2.0 * a) if a != 0.0 else math.nan
    return vertex, 2.0 * a, coefficients


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


def _indistinct(
    points: dict[float, float], a: float, x: float, b: float, noise: float = 0.0
) -> bool:
    """True when the bracket's values differ from the best by rounding (or two noise levels)
    only: no information is left to refine with (the resolution limit of Brent 1973, ch. 5,
    sec. 5.4)."""
    fx = points[x]
    floor = max(16.0 * EPSILON * abs(fx) + 1e-300, 2.0 * noise)
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
    x: float,
    a: float,
    b: float,
    tol: float,
    last: float,
    before: float,
    vertex: float,
    c: float,
) -> tuple[float, float, float]:
    """One step of Brent's (1973, ch. 5) safeguarded iteration inside ``[a, b]``, given the
    vertex and curvature of the parabola through the best points (nan for none).

    Returns the new point and the updated last and before-last step lengths.
    """
    m = 0.5 * (a + b)
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


def _result(
    points: dict[float, float], x: float | None, spent: int, noise: float = 0.0
) -> Found:
    ts = sorted(points)
    fs = [points[t] for t in ts]
    i = ts.index(x) if x is not None else _best(ts, fs)
    if noise > 0.0:
        i = _lowest_fitted(points, ts, i)
    elif len(ts) < 3:  # no parabola through fewer than three points (`_model`)
        return _found(ts, fs, i, math.nan, spent)
    elif math.isfinite(sum(fs)):  # `_model` of finite values
        return _found(ts, fs, i, _lowest_parabola(ts, fs)[1], spent)
    _, c = _model(points, ts[i], noise)
    return _found(ts, fs, i, c, spent)


def _found(ts: list[float], fs: list[float], i: int, c: float, spent: int) -> Found:
    """The result at ``ts[i]`` of the sorted points ``ts`` (values ``fs``), curvature ``c``."""
    lo = ts[i - 1] if i > 0 else ts[i]
    hi = ts[i + 1] if i + 1 < len(ts) else ts[i]
    return Found(ts[i], fs[i], lo, hi, c, spent)


def _lowest_fitted(points: dict[float, float], ts: list[float], i: int) -> int:
    """Index of the evaluated point lowest on the least-squares parabola around ``ts[i]``: with
    noise the lowest single value is biased low, the fitted one averages its neighbours.  ``i``
    itself when the parabola is missing or opens downward."""
    fitted = fitted_parabola(points, ts[i])
    if fitted is None or not fitted[1] > 0.0:
        return i
    used = sorted((abs(t - ts[i]), k) for k, t in enumerate(ts) if math.isfinite(points[t]))
    candidates = [k for _, k in used[:FITTED]]
    heights = [float(np.polyval(fitted[2], ts[k] - ts[i])) for k in candidates]
    return candidates[int(np.argmin(heights))]
