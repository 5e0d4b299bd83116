"""The outer loop: Powell's conjugate-direction search, written as a generator.

Theory of operation.  The search owns all decisions and does no I/O: it yields `Batch` records of
points (user coordinates) and receives their values; the driver evaluates them.  It works in the
scaled coordinates of `space.Space`, starting from the principal axes.

- A cycle line-searches each direction of the set in turn from the current point (`linesearch`),
  reusing the curvature each direction showed last time, so that on a quadratic a line search
  costs two evaluations.
- At the end of a cycle the point extrapolated as far again along the cycle's overall step is
  evaluated.  If Powell's (1964) test accepts, the overall step becomes a new direction: it is
  line-searched (the three points on it are already known) and replaces the direction of largest
  decrease, which keeps the set from collapsing (Zangwill 1967).
- When the set nevertheless becomes nearly dependent it is reset to principal axes (Brent 1973,
  ch. 7): the eigenvectors of the free Hessian estimate when every curvature is known, else the
  coordinate axes.
- The search stops when, on two consecutive cycles, the point moved less than ``point_tolerance``
  (scaled, infinity norm) and the value fell by less than ``value_tolerance * max(1, |f|)``.
  The driver ends it early by throwing `records.Halt` (budget, time, interrupt); it then returns
  its best point with that reason.

On a quadratic in n variables the directions become mutually conjugate, and the minimum is
reached after n cycles with exact line searches (Powell 1964).
"""

from __future__ import annotations

import math
from collections.abc import Generator
from dataclasses import dataclass

import numpy as np

from directional.method.directions import (
    DirectionSet,
    degenerate,
    powell_accepts,
    principal_axes,
    principal_axes_of_estimate,
    replaced,
)
from directional.method.linesearch import LineResult, line_search
from directional.method.space import Space
from directional.records import Batch, Halt, Outcome, Purpose, Stop

Search = Generator[Batch, np.ndarray, Outcome]

FIRST_STEP = 0.1  # first probe along an axis, in scaled units (a tenth of the problem's size)
FARTHEST = 1e10  # no line search goes farther, in scaled units: a descent to infinity stops there


@dataclass(frozen=True, slots=True, kw_only=True)
class Settings:
    """Tolerances of the direction-set search (see the module docstring)."""

    point_tolerance: float = 1e-6
    value_tolerance: float = 1e-10
    line_limit: int = 40
    # Ablations, for the benchmarks only: each switches off one idea of the method.
    parabolic: bool = True  # False: golden-section line searches
    replace_directions: bool = True  # False: keep the principal axes (no conjugate directions)
    reuse_curvature: bool = True  # False: every line search starts without a known curvature

    @property
    def line_tolerance(self) -> float:
        """Resolution of each line search: finer than the point tolerance, so that a converged
        cycle moves less than it (common practice, no source)."""
        return 0.1 * self.point_tolerance


class _Endless(Exception):
    """A line search ran out to `FARTHEST` and was still going down."""


class _Tracker:
    """The current point and value, updated as soon as a better evaluation arrives, and the
    resolution the line searches of this cycle work to."""

    def __init__(self, u: np.ndarray, value: float, resolution: float) -> None:
        self.u = u
        self.value = value
        self.resolution = resolution
        self.answered = 0  # finite values received in this cycle


def powell(space: Space, settings: Settings, start: np.ndarray | None = None) -> Search:
    """Minimize over ``space`` from its start (or ``start``, scaled coordinates)."""
    n = space.size
    u = np.zeros(n) if start is None else np.array(start, dtype=float)
    directions = principal_axes(n, FIRST_STEP)
    cycles = 0
    try:
        values = yield Batch(points=space.to_user(u)[None, :], purpose=Purpose.START)
    except Halt as halt:  # halted at the start point (-inf there, time up, Ctrl-C)
        return _outcome(_Tracker(u, math.inf, 0.0), halt.stop, cycles, directions, halt.reason)
    best = _Tracker(u, float(values[0]), _resolution(settings, FIRST_STEP))
    if not math.isfinite(best.value):
        return _outcome(best, Stop.STALLED, cycles, directions, "the start point failed")
    try:
        calm = 0
        while calm < 2:
            cycles += 1
            best.answered = 0
            directions, moved, dropped = yield from _cycle(space, settings, best, directions)
            if best.answered == 0:
                reason = "every evaluation of a whole cycle failed: the best point is walled in"
                return _outcome(best, Stop.STALLED, cycles, directions, reason)
            small = moved <= settings.point_tolerance and dropped <= (
                settings.value_tolerance * max(1.0, abs(best.value))
            )
            calm = calm + 1 if small else 0
            best.resolution = _resolution(settings, moved)
    except Halt as halt:
        return _outcome(best, halt.stop, cycles, directions, halt.reason)
    except _Endless:
        reason = (
            f"the objective kept decreasing out to {FARTHEST:g} scaled units along a line: its "
            "minimum lies at infinity, or it is unbounded below"
        )
        return _outcome(best, Stop.STALLED, cycles, directions, reason)
    return _outcome(best, Stop.CONVERGED, cycles, directions, "")


def _cycle(
    space: Space, settings: Settings, best: _Tracker, directions: DirectionSet
) -> Generator[Batch, np.ndarray, tuple[DirectionSet, float, float]]:
    """One cycle: a line search along each direction, then Powell's replacement test."""
    u0, f0 = best.u.copy(), best.value
    largest, largest_drop = 0, 0.0
    for i, d in enumerate(directions.vectors):
        before = best.value
        known_curvature = directions.curvatures[i] if settings.reuse_curvature else math.nan
        result = yield from _line(space, settings, best, d, directions.steps[i], known_curvature)
        directions = directions.measured(i, result.curvature, _next_step(result, settings))
        if before - best.value > largest_drop:
            largest, largest_drop = i, before - best.value
    overall = best.u - u0
    length = float(np.linalg.norm(overall))
    if settings.replace_directions and length > settings.line_tolerance:
        directions = yield from _replace(
            space, settings, best, directions, overall / length, length, f0, largest, largest_drop
        )
    if degenerate(directions):
        directions = principal_axes_of_estimate(directions) or principal_axes(space.size, FIRST_STEP)
    moved = float(np.max(np.abs(best.u - u0)))
    return directions, moved, f0 - best.value


def _replace(
    space: Space,
    settings: Settings,
    best: _Tracker,
    directions: DirectionSet,
    d: np.ndarray,
    length: float,
    f0: float,
    largest: int,
    largest_drop: float,
) -> Generator[Batch, np.ndarray, DirectionSet]:
    """Powell's test on the cycle's overall step ``length * d``; line search and swap if accepted."""
    lo, hi = space.segment(best.u, d)
    if hi < length:
        return directions  # the extrapolated point is infeasible: keep the set
    fn = best.value
    values = yield Batch(points=space.to_user(best.u + length * d)[None, :], purpose=Purpose.EXTRAPOLATE)
    fe = float(values[0])
    if not powell_accepts(f0, fn, fe, largest_drop):
        if fe < best.value:
            best.u, best.value = best.u + length * d, fe
        return directions
    known = {-length: f0, 0.0: fn, length: fe}
    result = yield from _line(space, settings, best, d, length, math.nan, known=known)
    return replaced(directions, largest, d, result.curvature, _next_step(result, settings))


def _line(
    space: Space,
    settings: Settings,
    best: _Tracker,
    d: np.ndarray,
    step: float,
    curvature: float,
    known: dict[float, float] | None = None,
) -> Generator[Batch, np.ndarray, LineResult]:
    """Line search from the current point along ``d``; moves ``best`` to its minimum."""
    base = best.u
    lo, hi = space.segment(base, d)
    lo, hi = max(lo, -FARTHEST), min(hi, FARTHEST)
    search = line_search(
        known if known is not None else {0.0: best.value},
        lo,
        hi,
        step=step,
        curvature=curvature,
        tolerance=best.resolution,
        limit=settings.line_limit,
        parabolic=settings.parabolic,
    )
    try:
        ts = next(search)
        while True:
            values = yield Batch(points=space.to_user(base + ts[:, None] * d), purpose=Purpose.LINE)
            for t, value in zip(ts, values):
                best.answered += math.isfinite(value)
                if value < best.value:
                    best.u, best.value = base + t * d, float(value)
            ts = search.send(values)
    except StopIteration as stop:
        result: LineResult = stop.value
    if result.value <= best.value:
        best.u, best.value = base + result.point * d, result.value
    if abs(result.point) >= 0.5 * FARTHEST:
        raise _Endless
    return result


def _resolution(settings: Settings, moved: float) -> float:
    """Line-search resolution for the next cycle: a hundredth of the last cycle's move, never
    finer than the final resolution.  Far from the minimum a line search need not be exact
    (common practice, no source); near it the resolution reaches ``settings.line_tolerance``."""
    return max(settings.line_tolerance, 0.01 * moved)


def _next_step(result: LineResult, settings: Settings) -> float:
    """Probe length for the next search along the same direction: the last move, not too small."""
    return max(abs(result.point), 100.0 * settings.line_tolerance)


def _outcome(
    best: _Tracker, stop: Stop, cycles: int, directions: DirectionSet, reason: str
) -> Outcome:
    return Outcome(
        point=best.u.copy(),
        value=best.value,
        stop=stop,
        cycles=cycles,
        directions=directions.vectors.copy(),
        curvatures=directions.curvatures.copy(),
        reason=reason,
    )
