"""Reference baselines, not part of the method: classic derivative-free minimizers from the papers.

These are written from the published descriptions, for the benchmarks only, so that the numbers
of `directional` can be compared with methods a user might otherwise pick.  None of them is used by
the search itself, and none is tuned: each keeps the coefficients its authors gave.

- `nelder_mead`: the simplex method of Nelder and Mead (1965) with their coefficients
  (reflection 1, expansion 2, contraction 1/2, shrink towards the best vertex by 1/2) and their
  stopping test (the standard deviation of the values at the vertices).
- `hooke_jeeves`: the pattern search of Hooke and Jeeves (1961): exploratory moves along the
  axes, pattern moves along the last successful step, the step halved when exploration fails.
- `coordinate_search`: cyclic search along the coordinate axes, each line search bracketed by
  golden-ratio expansion and refined by golden section (Kiefer 1953); no parabolas and no
  conjugate directions, so it shows what those two ideas of `directional` are worth.
- `golden_section`: the golden-section search on a bracket, also the comparator of the
  line-search benchmark.

Every function takes the objective, a start, a ``budget`` of evaluations and a tolerance; each
returns a `BaselineResult`.  A failed evaluation (an exception, NaN or inf) counts as ``+inf``, as
in the driver of `directional`.  The first step along each coordinate is a tenth of the start's
magnitude in that coordinate (0.1 where it is zero), the same first step `directional` takes
(common practice, no source), so that all methods start on the same footing.

References
----------
.. [1] J. A. Nelder and R. Mead, "A simplex method for function minimization", *Computer
   Journal* 7 (1965) 308-313.
.. [2] R. Hooke and T. A. Jeeves, "'Direct search' solution of numerical and statistical
   problems", *Journal of the ACM* 8 (1961) 212-229.
.. [3] J. Kiefer, "Sequential minimax search for a maximum", *Proceedings of the American
   Mathematical Society* 4 (1953) 502-506.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

Objective = Callable[[np.ndarray], float]

GOLDEN = 0.5 * (3.0 - math.sqrt(5.0))  # 0.381966..., the golden-section fraction (Kiefer 1953)
RATIO = 0.5 * (1.0 + math.sqrt(5.0))  # 1.618..., the golden ratio, for expanding a bracket


@dataclass(frozen=True, slots=True, kw_only=True)
class BaselineResult:
    """The best point a baseline found, its value and the evaluations it spent."""

    point: np.ndarray
    value: float
    evaluations: int


class _Spent(Exception):
    """Raised inside a baseline when its budget of evaluations is used up."""


class _Counted:
    """The objective with a budget: counts calls, keeps the best point, maps failures to +inf."""

    def __init__(self, objective: Objective, budget: int) -> None:
        self.objective = objective
        self.budget = budget
        self.calls = 0
        self.best_x: np.ndarray | None = None
        self.best_f = math.inf

    def __call__(self, x: np.ndarray) -> float:
        if self.calls >= self.budget:
            raise _Spent
        self.calls += 1
        try:
            value = float(self.objective(np.array(x, dtype=float)))
        except Exception:  # a failed evaluation, as the driver treats it
            value = math.inf
        if math.isnan(value):
            value = math.inf
        if value < self.best_f or self.best_x is None:
            self.best_x, self.best_f = np.array(x, dtype=float), value
        return value

    def result(self, x0: np.ndarray) -> BaselineResult:
        point = x0 if self.best_x is None else self.best_x
        return BaselineResult(point=point.copy(), value=self.best_f, evaluations=self.calls)


def first_steps(x0: np.ndarray) -> np.ndarray:
    """A tenth of each coordinate's magnitude, 0.1 where it is zero (see the module docstring).

    >>> first_steps(np.array([-1.2, 0.0, 30.0])).tolist()
    [0.12, 0.1, 3.0]
    """
    return 0.1 * np.where(x0 != 0.0, np.abs(x0), 1.0)


def _run(objective: Objective, x0: object, budget: int, body: Callable) -> BaselineResult:
    x = np.array(x0, dtype=float).reshape(-1)
    counted = _Counted(objective, int(budget))
    try:
        body(counted, x)
    except _Spent:
        pass
    return counted.result(x)


# ---------------------------------------------------------------------------- Nelder-Mead


def nelder_mead(
    objective: Objective, x0: object, *, budget: int, tolerance: float = 1e-10
) -> BaselineResult:
    """Minimize by the simplex method of Nelder and Mead (1965), with their coefficients.

    The first simplex is ``x0`` and ``x0 + h_i e_i`` with ``h = first_steps(x0)``.  The search
    stops when the standard deviation of the values at the vertices falls below ``tolerance``
    (their test), or the budget is spent.
    """

    def body(f: _Counted, x: np.ndarray) -> None:
        n = x.size
        simplex = np.vstack([x, x + np.diag(first_steps(x))])
        values = np.array([f(p) for p in simplex])
        while True:
            order = np.argsort(values, kind="stable")
            simplex, values = simplex[order], values[order]
            if _spread(values) < tolerance:
                return
            centroid = simplex[:n].mean(axis=0)
            reflected = 2.0 * centroid - simplex[n]  # alpha = 1
            fr = f(reflected)
            if fr < values[0]:
                expanded = centroid + 2.0 * (reflected - centroid)  # gamma = 2
                fe = f(expanded)
                simplex[n], values[n] = (expanded, fe) if fe < values[0] else (reflected, fr)
            elif fr <= values[n - 1]:
                simplex[n], values[n] = reflected, fr
            else:
                if fr < values[n]:
                    simplex[n], values[n] = reflected, fr
                contracted = centroid + 0.5 * (simplex[n] - centroid)  # beta = 1/2
                fc = f(contracted)
                if fc <= values[n]:  # their test: shrink only when y** > y_h
                    simplex[n], values[n] = contracted, fc
                else:  # shrink every vertex halfway towards the best one
                    simplex[1:] = 0.5 * (simplex[1:] + simplex[0])
                    values[1:] = [f(p) for p in simplex[1:]]

    return _run(objective, x0, budget, body)


def _spread(values: np.ndarray) -> float:
    """Standard deviation of the vertex values, the stopping test of Nelder and Mead (1965)."""
    if not np.all(np.isfinite(values)):
        return math.inf
    return float(np.sqrt(np.mean((values - values.mean()) ** 2)))


# ---------------------------------------------------------------------------- Hooke-Jeeves


def hooke_jeeves(
    objective: Objective, x0: object, *, budget: int, tolerance: float = 1e-8
) -> BaselineResult:
    """Minimize by the pattern search of Hooke and Jeeves (1961).

    Exploration tries ``+h_i`` then ``-h_i`` along each axis in turn, keeping any improvement.  A
    successful exploration from base ``b`` to ``b'`` is followed by a pattern move to
    ``2 b' - b`` and an exploration there, kept while it improves on ``b'``.  When exploration
    around the base fails every step is halved; the search stops when all steps are below
    ``tolerance`` times the first ones.
    """

    def body(f: _Counted, x: np.ndarray) -> None:
        steps = first_steps(x)
        smallest = tolerance * steps
        base, fbase = x.copy(), f(x)
        while np.any(steps >= smallest):
            point, fpoint = _explore(f, base, fbase, steps)
            if not fpoint < fbase:
                steps = 0.5 * steps
                continue
            while fpoint < fbase:  # pattern moves
                previous, base, fbase = base, point, fpoint
                pattern = 2.0 * base - previous
                point, fpoint = _explore(f, pattern, f(pattern), steps)

    return _run(objective, x0, budget, body)


def _explore(
    f: _Counted, x: np.ndarray, fx: float, steps: np.ndarray
) -> tuple[np.ndarray, float]:
    """Hooke and Jeeves' exploratory move: each axis in turn, forward then backward."""
    x = x.copy()
    for i, h in enumerate(steps):
        for move in (h, -h):
            trial = x.copy()
            trial[i] += move
            ft = f(trial)
            if ft < fx:
                x, fx = trial, ft
                break
    return x, fx


# ---------------------------------------------------------------------------- coordinate search


def coordinate_search(
    objective: Objective, x0: object, *, budget: int, tolerance: float = 1e-8
) -> BaselineResult:
    """Minimize along each coordinate axis in turn with golden-section line searches.

    Each line search starts from the last move along that axis (first: ``first_steps``), brackets
    the minimum by golden-ratio expansion and refines it by golden section to a resolution of a
    hundredth of the previous cycle's largest move, no finer than ``tolerance`` times the first
    step (so early line searches are coarse: common practice, no source).  The search stops when
    a cycle moves every coordinate by less than ``tolerance`` times its first step.
    """

    def body(f: _Counted, x: np.ndarray) -> None:
        first = first_steps(x)
        steps = first.copy()
        fx = f(x)
        coarse = 0.01  # resolution of the first cycle's line searches, relative to first steps
        while True:
            start = x.copy()
            for i in range(x.size):
                axis = np.zeros(x.size)
                axis[i] = 1.0
                resolution = max(coarse, tolerance) * first[i]
                t, fx = _golden_line(f, x, fx, axis, steps[i], resolution)
                x = x + t * axis
                steps[i] = max(abs(t), 10.0 * tolerance * first[i])
            moved = float(np.max(np.abs(x - start) / first))
            if moved < tolerance:
                return
            coarse = 0.01 * moved

    return _run(objective, x0, budget, body)


def _golden_line(
    f: _Counted, x: np.ndarray, fx: float, d: np.ndarray, step: float, resolution: float
) -> tuple[float, float]:
    """Best ``t`` along ``x + t d`` by bracketing and golden section; returns ``(t, f)``."""

    def g(t: float) -> float:
        return fx if t == 0.0 else f(x + t * d)

    a, b, c, fa, fb, fc = _bracket(g, step, fx)
    if not (fb < fa and fb < fc):  # no interior minimum found: keep the best point seen
        return min(((a, fa), (b, fb), (c, fc)), key=lambda p: p[1])
    return _golden_refine(g, a, b, c, fb, resolution)


def _bracket(
    g: Callable[[float], float], step: float, f0: float
) -> tuple[float, float, float, float, float, float]:
    """Three points ``a < b < c`` (or reversed) with ``g(b)`` below both ends, by golden-ratio
    expansion from ``0`` and ``step`` (at most 60 expansions)."""
    a, fa = 0.0, f0
    b, fb = step, g(step)
    if fb > fa:  # go the other way
        a, fa, b, fb = b, fb, a, fa
    c = b + RATIO * (b - a)
    fc = g(c)
    for _ in range(60):
        if fc > fb:
            break
        a, fa, b, fb = b, fb, c, fc
        c = b + RATIO * (b - a)
        fc = g(c)
    return a, b, c, fa, fb, fc


def _golden_refine(
    g: Callable[[float], float], a: float, b: float, c: float, fb: float, resolution: float
) -> tuple[float, float]:
    """Golden section inside the bracket ``(a, c)`` around ``b`` until it is ``resolution`` wide."""
    x, fx, _ = _golden_loop(g, min(a, c), max(a, c), b, fb, lambda x: 0.5 * resolution, math.inf)
    return x, fx


def _golden_loop(
    g: Callable[[float], float],
    lo: float,
    hi: float,
    x: float,
    fx: float,
    tolerance: Callable[[float], float],
    budget: float,
) -> tuple[float, float, int]:
    """Kiefer's (1953) iteration: put a point at the golden fraction of the larger part of the
    bracket ``(lo, hi)`` around the best point ``x``, keep the better, until the bracket is
    narrower than ``2 tolerance(x)`` or ``budget`` evaluations are spent."""
    spent = 0
    while hi - lo > 2.0 * tolerance(x) and spent < budget:
        u = x - GOLDEN * (x - lo) if x - lo > hi - x else x + GOLDEN * (hi - x)
        fu = g(u)
        spent += 1
        if fu < fx:
            lo, hi = (lo, x) if u < x else (x, hi)
            x, fx = u, fu
        elif u < x:
            lo = u
        else:
            hi = u
    return x, fx, spent


# ---------------------------------------------------------------------------- golden section


def golden_section(
    f: Callable[[float], float],
    lower: float,
    upper: float,
    *,
    tolerance: Callable[[float], float],
    budget: int = 200,
) -> tuple[float, float, int]:
    """Minimize ``f`` on ``[lower, upper]`` by golden section (Kiefer 1953).

    Starts from the golden-section point of the interval and shrinks the bracket by the golden
    ratio at every evaluation until it is narrower than ``2 tolerance(x)`` around the best point
    ``x``.  Returns ``(x, f(x), evaluations)``.

    >>> x, fx, spent = golden_section(lambda t: (t - 1.0) ** 2, 0.0, 3.0,
    ...                               tolerance=lambda t: 1e-6)
    >>> round(x, 5), spent < 35
    (1.0, True)
    """
    lo, hi = float(lower), float(upper)
    x = lo + GOLDEN * (hi - lo)
    fx = f(x)
    x, fx, spent = _golden_loop(f, lo, hi, x, fx, tolerance, budget - 1)
    return x, fx, spent + 1
