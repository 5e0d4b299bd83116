"""Run every solver on every (problem, start) pair and turn the runs into profiles."""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from directional.benchmarking import profiles
from directional.benchmarking.problems import Pair
from directional.benchmarking.solvers import Run, Solver, record

DATA_BUDGETS = np.arange(0, 101)  # data profiles: 0 to 100 simplex gradients, n + 1 each
PERFORMANCE_FACTORS = 2.0 ** np.linspace(0, 8, 161)  # performance profiles: ratios 1 to 256


@dataclass(frozen=True, slots=True, kw_only=True)
class Study:
    """Runs ``runs[p][s]`` of solver ``s`` on pair ``p``, within ``units (n + 1)`` evaluations."""

    pairs: list[Pair]
    dropped: list[str]
    solvers: list[Solver]
    runs: list[list[Run]]
    units: int

    @property
    def names(self) -> list[str]:
        return [s.name for s in self.solvers]

    def histories(self) -> list[list[np.ndarray]]:
        """Best value after each evaluation, per pair and solver."""
        return [[profiles.best_so_far(run.values) for run in row] for row in self.runs]

    def counts(self, tau: float) -> np.ndarray:
        """Evaluations each solver needs on each pair to pass the test for ``tau`` (or inf)."""
        return profiles.solve_counts(self.histories(), [p.f0 for p in self.pairs], tau)

    def lowest(self) -> np.ndarray:
        """``f_L`` per pair: the least value any solver found, or the start's."""
        return np.array([
            min([pair.f0, *[float(np.min(h)) for h in row if h.size]])
            for pair, row in zip(self.pairs, self.histories())
        ])

    def select(self, groups: Sequence[str]) -> list[int]:
        """Indices of the solvers in the given groups, in order."""
        return [i for i, s in enumerate(self.solvers) if s.group in groups]


def run_study(
    pairs: list[Pair],
    dropped: list[str],
    solvers: list[Solver],
    units: int,
    progress: Callable[[str], None] = lambda text: None,
) -> Study:
    """Run each solver on each pair with a budget of ``units (n + 1)`` evaluations.

    A pair on which no solver finds a value below the start's is left out (and listed in
    ``dropped``): the test of Moré and Wild (2009) would count it solved by everyone at once.
    """
    kept, runs, dropped = [], [], list(dropped)
    for k, pair in enumerate(pairs):
        budget = units * (pair.n + 1)
        row = [record(s, pair.problem, pair.start, budget) for s in solvers]
        progress(f"  pair {k + 1}/{len(pairs)}: {pair.label}")
        if not any(np.any(run.values < pair.f0) for run in row):
            dropped.append(f"{pair.label.strip()}: no solver found a value below the start's")
            continue
        kept.append(pair)
        runs.append(row)
    return Study(pairs=kept, dropped=dropped, solvers=solvers, runs=runs, units=units)
