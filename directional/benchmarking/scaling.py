"""How the method scales: quadratics by dimension, the optimizer's own time, the line search alone.

1. Quadratics.  ``f(x) = (x - x*)ᵀ A (x - x*) / 2`` with ``A = Q diag(λ) Qᵀ``, ``Q`` a random
   orthogonal matrix and ``λ`` spaced geometrically from 1 to the condition number; the search
   starts at 0 and ``x*`` is standard normal.  We count the evaluations until
   ``f - f* <= 1e-8 (f(x0) - f*)`` and divide by ``(n + 1)(n + 2) / 2``, the number of values
   that determine a quadratic in ``n`` variables: no method that learns the function from values
   alone can do with fewer in general (Powell 1964 gives n cycles of n line searches).
   Rosenbrock's function (Moré, Garbow & Hillstrom 1981, problem 1) is counted alongside.
2. Overhead.  The optimizer's own time per evaluation, total minus the time inside the
   objective, on a cheap objective; as wall time, and as processor time of this process, which
   other processes on a shared machine do not inflate.
3. Line search.  `directional.line_minimum` against golden section (Kiefer 1953) on smooth
   functions of one variable with a known minimizer, counting evaluations until a point within
   1e-8 of the minimizer is evaluated; and the order of convergence of the parabolic steps,
   measured from the errors ``e_k`` of successive points (Jarratt 1967: 1.3247, the real root of
   ``p³ = p + 1``).

References
----------
.. [1] M. J. D. Powell, "An efficient method for finding the minimum of a function of several
   variables without calculating derivatives", *Computer Journal* 7 (1964) 155-162.
.. [2] P. Jarratt, "An iterative method for locating turning points", *Computer Journal* 10
   (1967) 82-84.
.. [3] J. Kiefer, "Sequential minimax search for a maximum", *Proceedings of the American
   Mathematical Society* 4 (1953) 502-506.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Generator, Sequence
from dataclasses import dataclass

import numpy as np

from directional.api.minimization import line_minimum, minimize
from directional.benchmarking import baselines
from directional.benchmarking.solvers import Recorder
from directional.method.linesearch import line_search
from directional.method.search import Settings, powell
from directional.method.space import build_space
from directional.records import Batch, Purpose
from directional.run.driver import Driver
from directional.testproblems import mgh

REDUCTION = 1e-8  # quadratics: relative reduction of f - f* to reach
LINE_TOLERANCE = 1e-8  # line search: distance to the minimizer to reach


# ---------------------------------------------------------------------------- quadratics


def random_quadratic(
    n: int, condition: float, seed: int
) -> tuple[Callable[[np.ndarray], float], np.ndarray]:
    """A convex quadratic with the given condition number and its minimizer (see the module)."""
    rng = np.random.default_rng(seed)
    q, r = np.linalg.qr(rng.standard_normal((n, n)))
    q = q * np.sign(np.diag(r))  # a uniformly distributed orthogonal matrix (common practice)
    eigenvalues = np.geomspace(1.0, condition, n) if n > 1 else np.ones(1)
    a = (q * eigenvalues) @ q.T
    a = 0.5 * (a + a.T)
    minimizer = rng.standard_normal(n)

    def f(x: np.ndarray) -> float:
        d = x - minimizer
        return 0.5 * float(d @ a @ d)

    return f, minimizer


@dataclass(frozen=True, slots=True, kw_only=True)
class Count:
    """Evaluations to the target reduction, and to the search's own stop."""

    label: str
    n: int
    reached: float  # evaluations until f - f* <= 1e-8 (f0 - f*); inf if never
    spent: int  # evaluations until the search stopped
    stop: str
    cycles: int

    @property
    def ratio(self) -> float:
        return self.reached / ((self.n + 1) * (self.n + 2) / 2)


def _count(label: str, f: Callable, start: np.ndarray, f_star: float, budget: int) -> Count:
    recorder = Recorder(f)
    solution = minimize(recorder, start, budget=budget, check=False)
    gap = np.array(recorder.values) - f_star
    hit = np.nonzero(gap <= REDUCTION * gap[0])[0]
    reached = float(hit[0] + 1) if hit.size else math.inf
    return Count(label=label, n=start.size, reached=reached, spent=len(recorder.values),
                 stop=solution.stop.value, cycles=solution.cycles)


def quadratics(
    sizes: Sequence[int], seeds: Sequence[int], condition: float = 1e3, cap: float = 40.0
) -> list[Count]:
    """Counts on random quadratics, each given ``cap (n + 1)(n + 2) / 2`` evaluations at most."""
    out = []
    for n in sizes:
        for seed in seeds:
            f, _ = random_quadratic(n, condition, seed)
            budget = int(cap * (n + 1) * (n + 2) / 2)
            out.append(_count(f"quadratic seed {seed}", f, np.zeros(n), 0.0, budget))
    return out


def rosenbrock() -> Count:
    """The same count on Rosenbrock's function from its standard start (f* = 0)."""
    problem = mgh.problem(1)
    return _count("Rosenbrock", problem, problem.start.copy(), 0.0, 2000)


# ---------------------------------------------------------------------------- overhead


@dataclass(frozen=True, slots=True, kw_only=True)
class Overhead:
    """Seconds per evaluation spent by the optimizer itself (outside the objective)."""

    solver: str
    n: int
    evaluations: int
    runs: int
    per_evaluation: float  # wall time
    cpu_per_evaluation: float  # processor time of this process
    objective_per_evaluation: float


def overhead(
    sizes: Sequence[int], evaluations: int, nelder_mead: bool = True, rounds: int = 1
) -> list[Overhead]:
    """Optimizer time per evaluation, over runs repeated until ``evaluations`` are spent.

    Besides `directional.minimize` the same search is timed inside a bare `Driver` and driven by
    a plain loop with no driver at all, and the driver alone drives a generator that asks for
    random points one at a time, which shows where the time goes: the search generator, the
    driver (cache, records, budget) or `minimize` (checks, building the solution).

    Each run minimizes a random convex quadratic (condition 1e3, a fresh seed each time, the
    objective costs one matrix-vector product) from 0 with the evaluations still to spend, and
    stops on its own or at that budget; so short runs (small n) carry their start-up cost, as
    they do for a user.  The time inside the objective is measured by evaluating the run's points
    again in a plain loop once it has ended (`_Tally`), not by reading clocks around each call:
    those reads would count to the optimizer.

    ``rounds``: the solvers are timed one after another this many times at each size, and each
    row is the round with the least processor time per evaluation (the least disturbed by other
    work on the machine; the runs themselves are the same in every round).
    """
    runs = [("directional", _run_ours), ("driver + search", _run_driver),
            ("search alone", _run_search), ("search alone, no model", _run_search_plain),
            ("driver alone", _run_driver_alone)]
    if nelder_mead:
        runs.append(("Nelder-Mead", _run_nelder_mead))
    out = []
    for n in sizes:
        fastest: dict[str, Overhead] = {}
        for _ in range(rounds):
            for name, run in runs:
                row = _timed(name, run, n, evaluations)
                if name not in fastest or row.cpu_per_evaluation < fastest[name].cpu_per_evaluation:
                    fastest[name] = row
        out += [fastest[name] for name, _ in runs]
    return out


def _timed(name: str, run: Callable, n: int, evaluations: int) -> Overhead:
    """One row of `overhead`: ``run`` repeated on fresh quadratics until ``evaluations`` are spent."""
    spent, count = 0, 0
    wall = cpu = wall_inside = cpu_inside = 0.0
    while spent < evaluations:
        f, _ = random_quadratic(n, 1e3, seed=1000 + count)
        tally = _Tally(f)
        tick, tock = time.perf_counter(), time.process_time()
        run(tally, np.zeros(n), max(evaluations - spent, n + 1))
        wall += time.perf_counter() - tick
        cpu += time.process_time() - tock
        seconds, cpu_seconds = tally.replay()
        wall_inside += seconds
        cpu_inside += cpu_seconds
        spent += len(tally.points)
        count += 1
    return Overhead(solver=name, n=n, evaluations=spent, runs=count,
                    per_evaluation=(wall - wall_inside) / spent,
                    cpu_per_evaluation=(cpu - cpu_inside) / spent,
                    objective_per_evaluation=wall_inside / spent)


class _Tally:
    """An objective wrapped for the overhead runs: it keeps a copy of each point it is asked
    for, and nothing else per call; `replay` then times the objective on those points.

    A clock read costs up to a good part of a microsecond (the processor-time clock is a system
    call), a sizeable share of a cheap objective's own time: read around each call, as `Recorder`
    does, part of it would be counted to the optimizer.  The copy kept per call is counted to the
    optimizer instead, a small overstatement on the safe side.

    >>> tally = _Tally(lambda x: float(x @ x))
    >>> tally(np.array([3.0, 4.0])), len(tally.points)
    (25.0, 1)
    """

    def __init__(self, objective: Callable[[np.ndarray], float]) -> None:
        self.objective = objective
        self.points: list[np.ndarray] = []

    def __call__(self, x: np.ndarray) -> float:
        self.points.append(x.copy())
        return self.objective(x)

    def replay(self) -> tuple[float, float]:
        """Wall and processor seconds the objective takes on the kept points, in a plain loop."""
        objective, points = self.objective, self.points
        tick, tock = time.perf_counter(), time.process_time()
        for x in points:
            objective(x)
        return time.perf_counter() - tick, time.process_time() - tock


def _run_ours(f: Callable, start: np.ndarray, budget: int) -> None:
    minimize(f, start, budget=budget, check=False)


def _run_driver(f: Callable, start: np.ndarray, budget: int) -> None:
    Driver(objective=f, budget=budget).run(powell(build_space(start), Settings()))


def _run_driver_alone(f: Callable, start: np.ndarray, budget: int) -> None:
    points = np.random.default_rng(budget).standard_normal((budget, start.size))

    def asks() -> Generator[Batch, np.ndarray, None]:
        for x in points:
            yield Batch(points=x[None, :], purpose=Purpose.LINE)

    Driver(objective=f, budget=budget).run(asks())


def _run_search_plain(f: Callable, start: np.ndarray, budget: int) -> None:
    _run_search(f, start, budget, Settings(model_steps=False))


def _run_search(
    f: Callable, start: np.ndarray, budget: int, settings: Settings | None = None
) -> None:
    search = powell(build_space(start), settings or Settings())
    spent = 0
    try:
        batch = next(search)
        while spent + len(batch.points) <= budget:
            values = np.array([f(x) for x in batch.points])
            spent += len(values)
            batch = search.send(values)
    except StopIteration:
        return
    search.close()


def _run_nelder_mead(f: Callable, start: np.ndarray, budget: int) -> None:
    baselines.nelder_mead(f, start, budget=budget)


# ---------------------------------------------------------------------------- line search


@dataclass(frozen=True, slots=True, kw_only=True)
class LineFunction:
    """A smooth function of one variable on an interval, with its minimizer (f* = 0)."""

    name: str
    f: Callable[[float], float]
    lower: float
    upper: float
    minimizer: float
    symmetric: bool = False  # f''' = 0 at the minimizer: faster than order 1.32


def line_functions() -> list[LineFunction]:
    """Our smooth test functions, each with minimum value 0 at a known point (no cancellation in
    f near the minimizer, so 1e-8 is resolvable).  Invented for this benchmark."""
    return [
        LineFunction(name="(t-1)^2 (1+t^2)", f=lambda t: (t - 1.0) ** 2 * (1.0 + t * t),
                     lower=-2.0, upper=4.0, minimizer=1.0),
        LineFunction(name="(e^t-2)^2", f=lambda t: (math.exp(t) - 2.0) ** 2,
                     lower=0.0, upper=3.0, minimizer=math.log(2.0)),
        LineFunction(name="(t-1/2)^2/(1+t^2)", f=lambda t: (t - 0.5) ** 2 / (1.0 + t * t),
                     lower=0.0, upper=3.0, minimizer=0.5),
        LineFunction(name="(t^3-2)^2", f=lambda t: (t**3 - 2.0) ** 2,
                     lower=0.0, upper=3.0, minimizer=2.0 ** (1.0 / 3.0)),
        LineFunction(name="(ln t-1/2)^2", f=lambda t: (math.log(t) - 0.5) ** 2,
                     lower=0.5, upper=4.0, minimizer=math.exp(0.5)),
        LineFunction(name="sin^2(t-0.3)", f=lambda t: math.sin(t - 0.3) ** 2,
                     lower=-1.0, upper=1.2, minimizer=0.3, symmetric=True),
        LineFunction(name="sinh^2((t-0.7)/2)", f=lambda t: math.sinh(0.5 * (t - 0.7)) ** 2,
                     lower=-1.0, upper=3.0, minimizer=0.7, symmetric=True),
    ]


@dataclass(frozen=True, slots=True, kw_only=True)
class LineCount:
    """Evaluations of one line search method on one function."""

    function: str
    method: str
    reached: float  # evaluations until a point within 1e-8 of the minimizer; inf if never
    spent: int  # evaluations until the method stopped on its own tolerance
    error: float  # distance of the returned point from the minimizer


def line_counts(functions: Sequence[LineFunction]) -> list[LineCount]:
    """`line_minimum` and golden section, both to tolerance 1e-8 (relative to ``|t|``, plus a
    thousandth of it times the interval width, as `line_minimum` documents)."""
    out = []
    for fn in functions:
        width = fn.upper - fn.lower

        def tolerance(t: float, width: float = width) -> float:
            return LINE_TOLERANCE * (abs(t) + width / 1000.0)

        points: list[float] = []

        def traced(t: float, fn: LineFunction = fn, points: list[float] = points) -> float:
            points.append(t)
            return fn.f(t)

        result = line_minimum(traced, fn.lower, fn.upper, tolerance=LINE_TOLERANCE, budget=500)
        out.append(_line_count(fn, "parabolic (directional)", points, result.point))
        golden: list[float] = []

        def traced_golden(t: float, fn: LineFunction = fn, golden: list[float] = golden) -> float:
            golden.append(t)
            return fn.f(t)

        x, _, _ = baselines.golden_section(traced_golden, fn.lower, fn.upper, tolerance=tolerance,
                                           budget=500)
        out.append(_line_count(fn, "golden section", golden, x))
    return out


def _line_count(fn: LineFunction, method: str, points: list[float], final: float) -> LineCount:
    errors = np.abs(np.array(points) - fn.minimizer)
    hit = np.nonzero(errors <= LINE_TOLERANCE * max(1.0, abs(fn.minimizer)))[0]
    return LineCount(function=fn.name, method=method,
                     reached=float(hit[0] + 1) if hit.size else math.inf,
                     spent=len(points), error=abs(final - fn.minimizer))


def errors_of_parabolic_steps(fn: LineFunction, tolerance: float = 1e-14) -> np.ndarray:
    """Distances from the minimizer of the successive points of the line search alone.

    Runs the search generator of `directional.method.linesearch` in its exact mode (as `line_minimum`
    does) with a tolerance far below 1e-8, so that the asymptotic steps can be seen; the public
    function stops at the square root of the machine precision.
    """
    width = fn.upper - fn.lower
    search = line_search({}, fn.lower, fn.upper, step=0.1 * width,
                         tolerance=1e-3 * tolerance * width, relative=tolerance,
                         start=fn.lower + baselines.GOLDEN * width, limit=200, exact=True)
    points = []
    try:
        ts = next(search)
        while True:
            points.extend(float(t) for t in ts)
            ts = search.send(np.array([fn.f(float(t)) for t in ts]))
    except StopIteration:
        pass
    return np.abs(np.array(points) - fn.minimizer)


def convergence_order(errors: Sequence[float], low: float = 1e-12, high: float = 1e-2) -> tuple[
    float, int
]:
    """Order of convergence from successive errors: the least-squares slope of ``log e_{k+1}``
    against ``log e_k`` over consecutive errors inside ``[low, high]``; returns ``(order, pairs)``.

    A sequence of order ``p`` has ``log e_{k+1} ≈ p log e_k + c`` (Ortega & Rheinboldt 1970,
    ch. 9); the window keeps out the bracketing steps and the steps at the tolerance.

    >>> e = [0.5 ** (2 ** k) for k in range(1, 6)]  # quadratic convergence
    >>> round(convergence_order(e, 1e-12, 1.0)[0], 6)
    2.0
    """
    pairs = [_pair(errors, k) for k in range(len(errors) - 1)]
    return _slope([p for p in pairs if low <= min(p) and max(p) <= high])


def pooled_order(sequences: Sequence[Sequence[float]], low: float = 1e-12,
                 high: float = 1e-2) -> tuple[float, int]:
    """`convergence_order` over the consecutive pairs of several sequences at once."""
    pairs = []
    for errors in sequences:
        pairs += [_pair(errors, k) for k in range(len(errors) - 1)]
    return _slope([p for p in pairs if low <= min(p) and max(p) <= high])


def _pair(errors: Sequence[float], k: int) -> tuple[float, float]:
    return float(errors[k]), float(errors[k + 1])


def _slope(pairs: list[tuple[float, float]]) -> tuple[float, int]:
    if len(pairs) < 2:
        return math.nan, len(pairs)
    x = np.log([p[0] for p in pairs])
    y = np.log([p[1] for p in pairs])
    if np.ptp(x) == 0.0:
        return math.nan, len(pairs)
    return float(np.polyfit(x, y, 1)[0]), len(pairs)


def jarratt_order() -> float:
    """The order of successive parabolic interpolation: the real root of ``p³ = p + 1``
    (Jarratt 1967), 1.3247..."""
    roots = np.roots([1.0, 0.0, -1.0, -1.0])
    return float(max(r.real for r in roots if abs(r.imag) < 1e-12))
