"""The noisy benchmarks: the MGH set under relative noise, and smooth functions plus Gaussian noise.

Both run every solver on objectives of `directional.benchmarking.noisy`, which keep the true
(noise-free) value of every point asked for.  A solver is judged on those true values, never on
the noisy ones it saw: with noise drawn anew at each evaluation, the lowest noisy value is biased
low, and a lucky draw is not progress.

- **Noisy MGH profiles.**  The pairs of `problems.pairs` under `RelativeNoise` of level 1e-3.
  After ``k`` evaluations a solver has reached the least *true* value among the points it has
  evaluated; the test of Moré & Wild (2009, eq. 2.2) is applied to that, with ``f(x0)`` the true
  value at the start and ``f_L`` the least true value any solver evaluated on the pair.  This
  credits a solver for a good point even when the noise hid it from the solver, so the profiles
  also report, at the full budget, how often the point each solver *returned* passes the same
  test (its true value; for `directional` the solution's point, for a baseline its lowest noisy
  value).  Every solver on a pair sees the same stream of random numbers (the seed is fixed per
  pair), so the whole study is deterministic.
- **Smooth plus Gaussian.**  `noisy.smooth_functions` with `GaussianNoise` of their own σ, five
  seeds each; `directional.minimize` with its default settings, the baselines with the same
  budget (the default 1000 (n + 1) of `minimize`); the final true gap ``f(x) - 0`` of the
  returned point in units of σ, the verdict and the evaluations.

References
----------
.. [1] J. J. Moré and S. M. Wild, "Benchmarking derivative-free optimization algorithms",
   *SIAM Journal on Optimization* 20 (2009) 172-191.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

import directional as dl
from directional.benchmarking import baselines, noisy, profiles
from directional.benchmarking.problems import Pair

SEED = 2009  # the root of every random stream of the study
LEVEL = 1e-3  # relative noise of the MGH profiles (the level of Moré & Wild 2009, from memory)
NOISY_TAUS = (1e-1, 1e-3)
HEADLINE = 1e-3  # the accuracy of the target
SEEDS = (0, 1, 2, 3, 4)  # of the Gaussian table


@dataclass(frozen=True, slots=True, kw_only=True)
class Outcome:
    """What one solver did on one noisy objective: true values in order, and where it ended."""

    true_values: np.ndarray  # noise-free value of each evaluation, in order, within the budget
    returned: np.ndarray  # the point the solver returned
    returned_value: float  # its true value
    verdict: str = ""  # `directional`'s verdict (empty for a baseline)


# ---------------------------------------------------------------------------- solvers


def _directional(check: bool) -> Callable:
    def run(objective: Callable, start: np.ndarray, budget: int | None) -> tuple[np.ndarray, str]:
        try:
            sol = dl.minimize(objective, start, budget=budget, check=check)
        except dl.ObjectiveError:  # the start failed: it is what the solver returns
            return np.array(start, dtype=float), "failed"
        return sol.point, sol.verdict.value

    return run


def _baseline(method: Callable[..., baselines.BaselineResult]) -> Callable:
    def run(objective: Callable, start: np.ndarray, budget: int | None) -> tuple[np.ndarray, str]:
        return method(objective, start, budget=budget).point, ""

    return run


BASELINES = {
    "Nelder-Mead": _baseline(baselines.nelder_mead),
    "Hooke-Jeeves": _baseline(baselines.hooke_jeeves),
    "coordinate search": _baseline(baselines.coordinate_search),
}


def profile_solvers() -> dict[str, Callable]:
    """`directional` as in the smooth profiles (no curvature check, not part of the search), then
    the baselines."""
    return {"directional": _directional(False), **BASELINES}


def table_solvers() -> dict[str, Callable]:
    """`directional` with every default (the check included), then the baselines."""
    return {"directional": _directional(True), **BASELINES}


def run_one(solve: Callable, wrapped: noisy.RelativeNoise | noisy.GaussianNoise,
            start: np.ndarray, budget: int) -> Outcome:
    """Run ``solve`` on the noisy objective and judge where it ended on the true function."""
    point, verdict = solve(wrapped, np.array(start, dtype=float), budget)
    true = np.array(wrapped.true_values[:budget], dtype=float)
    try:
        value = float(wrapped.function(np.asarray(point, dtype=float)))
    except Exception:
        value = math.inf
    return Outcome(true_values=true, returned=np.asarray(point, dtype=float),
                   returned_value=value if math.isfinite(value) else math.inf, verdict=verdict)


# ---------------------------------------------------------------------------- noisy MGH


@dataclass(frozen=True, slots=True, kw_only=True)
class NoisyStudy:
    """Outcomes ``runs[p][s]`` of solver ``s`` on pair ``p`` under relative noise."""

    pairs: list[Pair]
    dropped: list[str]
    names: list[str]
    runs: list[list[Outcome]]
    units: int
    streams: int = 1  # noise streams per pair: each pair appears this many times in ``pairs``

    def lowest(self) -> np.ndarray:
        """``f_L`` per pair: the least true value any solver evaluated, or the start's."""
        return np.array([
            min([pair.f0, *[float(np.min(o.true_values)) for o in row if o.true_values.size]])
            for pair, row in zip(self.pairs, self.runs)
        ])

    def counts(self, tau: float) -> np.ndarray:
        """Evaluations each solver needs on each pair before it has evaluated a point whose true
        value passes the test for ``tau`` (or inf)."""
        histories = [[profiles.best_so_far(o.true_values) for o in row] for row in self.runs]
        return profiles.solve_counts(histories, [p.f0 for p in self.pairs], tau)

    def returned_solved(self, tau: float) -> np.ndarray:
        """Whether the point each solver returned passes the test for ``tau``, per pair and solver."""
        lowest = self.lowest()
        out = np.zeros((len(self.pairs), len(self.names)), dtype=bool)
        for p, (pair, row) in enumerate(zip(self.pairs, self.runs)):
            need = (1.0 - tau) * max(pair.f0 - lowest[p], 0.0)
            out[p] = [pair.f0 - o.returned_value >= need for o in row]
        return out


def pair_seed(pair: Pair, stream: int = 0) -> list[int]:
    """The random stream of a pair: the same for every solver on it (common random numbers)."""
    return [SEED, pair.problem.number, int(round(pair.factor)), stream]


def run_noisy_mgh(
    pairs: Sequence[Pair],
    dropped: Sequence[str],
    solvers: dict[str, Callable],
    units: int,
    level: float = LEVEL,
    streams: int = 1,
    progress: Callable[[str], None] = lambda text: None,
) -> NoisyStudy:
    """Every solver on every pair under relative noise, ``units (n + 1)`` evaluations each, once
    per noise stream (``streams`` > 1 repeats each pair with other random numbers).

    A pair on which no solver evaluated a point truly below the start is left out, as in the
    smooth study (the test would count it solved by everyone at once).
    """
    kept, runs, dropped = [], [], list(dropped)
    for stream in range(streams):
        for k, pair in enumerate(pairs):
            budget = units * (pair.n + 1)
            row = [run_one(solve, noisy.RelativeNoise(pair.problem, level=level,
                                                      seed=pair_seed(pair, stream)),
                           pair.start, budget) for solve in solvers.values()]
            progress(f"  noisy pair {k + 1}/{len(pairs)}, stream {stream + 1}: {pair.label}")
            if not any(np.any(o.true_values < pair.f0) for o in row):
                dropped.append(f"{pair.label.strip()}" + (f" (stream {stream + 1})" if streams > 1
                                                          else "")
                               + ": no solver evaluated a point truly below the start")
                continue
            kept.append(pair)
            runs.append(row)
    return NoisyStudy(pairs=kept, dropped=dropped, names=list(solvers), runs=runs, units=units,
                      streams=streams)


def behind(profile: np.ndarray, budgets: Sequence[float], ours: int) -> dict[int, list[float]]:
    """The budgets at which another solver's data profile is above ``ours``, per solver.

    >>> d = np.array([[0.0, 0.0], [0.5, 0.6], [0.9, 0.6]])
    >>> behind(d, [0, 1, 2], 0)
    {1: [1]}
    """
    out: dict[int, list[float]] = {}
    for s in range(profile.shape[1]):
        if s == ours:
            continue
        lagging = [b for b, row in zip(budgets, profile) if row[s] > row[ours]]
        if lagging:
            out[s] = lagging
    return out


# ---------------------------------------------------------------------------- smooth + Gaussian


@dataclass(frozen=True, slots=True, kw_only=True)
class GaussianRow:
    """One solver on one function over the seeds."""

    function: noisy.Smooth
    solver: str
    gaps: tuple[float, ...]  # final true gap / σ, one per seed
    verdicts: tuple[str, ...]
    evaluations: tuple[int, ...]

    def within(self, limit: float = 10.0) -> int:
        return sum(1 for g in self.gaps if g <= limit)


def run_gaussian(
    functions: Sequence[noisy.Smooth],
    solvers: dict[str, Callable],
    seeds: Sequence[int] = SEEDS,
    progress: Callable[[str], None] = lambda text: None,
) -> list[GaussianRow]:
    """Every solver on every function and seed; budget 1000 (n + 1), the default of `minimize`."""
    rows = []
    for f, function in enumerate(functions):
        budget = 1000 * (function.n + 1)
        for name, solve in solvers.items():
            outcomes = [
                run_one(solve, noisy.GaussianNoise(function.function, sigma=function.sigma,
                                                   seed=[SEED, f, seed]),
                        function.start, budget)
                for seed in seeds
            ]
            rows.append(GaussianRow(
                function=function, solver=name,
                gaps=tuple(o.returned_value / function.sigma for o in outcomes),
                verdicts=tuple(o.verdict for o in outcomes),
                evaluations=tuple(int(o.true_values.size) for o in outcomes),
            ))
        progress(f"  gaussian: {function.name}")
    return rows
