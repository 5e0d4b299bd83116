"""The (problem, start) pairs of the profile benchmark: the Moré–Garbow–Hillstrom (1981) set.

Every problem of the set is taken at its standard size from `directional.testproblems.mgh`
(the sample dimensions of Algorithm 566, at most 12 variables), from the paper's standard start
and from the starts 10 and 100 times farther out, as the paper itself does.  Two choices are ours:

- Problems 21 (extended Rosenbrock) and 22 (extended Powell singular) at their sample sizes
  n = 2 and n = 4 are the same functions as problems 1 and 13; they are taken at n = 10 and
  n = 8 instead, so that no pair is counted twice.
- A pair whose start cannot be evaluated (a value that overflows, such as problem 6 from 100
  times its start) is left out: no solver can begin there.  So is a pair whose start already has
  the paper's minimum value (problem 11 from 10 times its start is the minimizer itself): every
  solver would pass every test at once.  `pairs` reports both.

References
----------
.. [1] J. J. Moré, B. S. Garbow and K. E. Hillstrom, "Testing unconstrained optimization
   software", *ACM Transactions on Mathematical Software* 7 (1981) 17-41.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from directional.testproblems import mgh

LARGER = {21: 10, 22: 8}  # problem number -> n used instead of the sample size (see above)
AT_MINIMUM = 1e-10  # a start within this (relative) of the paper's minimum value is a minimizer


@dataclass(frozen=True, slots=True, kw_only=True)
class Pair:
    """One test problem and one start."""

    problem: mgh.TestProblem
    factor: float  # the start is factor * the paper's standard start
    start: np.ndarray
    f0: float

    @property
    def n(self) -> int:
        return self.problem.n

    @property
    def label(self) -> str:
        return f"{self.problem.number:2d} {self.problem.name} (n={self.n}), {self.factor:g}x"


def pairs(
    numbers: tuple[int, ...] | None = None, factors: tuple[float, ...] = (1.0, 10.0, 100.0)
) -> tuple[list[Pair], list[str]]:
    """The benchmark pairs, and the labels of the pairs left out because their start fails.

    ``numbers`` limits the problems (default: all 35).
    """
    chosen, dropped = [], []
    for problem in _problems(numbers):
        for factor in factors:
            start = problem.scaled_start(factor)
            f0 = problem(start)
            label = f"{problem.number:2d} {problem.name} (n={problem.n}), {factor:g}x"
            if not math.isfinite(f0):
                dropped.append(f"{label.strip()}: the start cannot be evaluated")
                continue
            fmin = problem.fmin
            if fmin is not None and f0 - fmin <= AT_MINIMUM * max(1.0, abs(fmin)):
                dropped.append(f"{label.strip()}: the start is a minimizer")
                continue
            chosen.append(Pair(problem=problem, factor=factor, start=start, f0=f0))
    return chosen, dropped


def _problems(numbers: tuple[int, ...] | None) -> list[mgh.TestProblem]:
    wanted = None if numbers is None else set(numbers)
    out = []
    for problem in mgh.catalogue(max_n=12):
        if wanted is not None and problem.number not in wanted:
            continue
        if problem.number in LARGER:
            problem = mgh.problem(problem.number, n=LARGER[problem.number])
        out.append(problem)
    return out
