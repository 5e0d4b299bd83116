"""Data profiles and performance profiles of solvers on a set of (problem, start) pairs.

A solver *solves* a pair within ``k`` evaluations when the best value it has found after ``k``
evaluations passes the convergence test of Moré and Wild (2009, eq. 2.2)::

    f(x0) - f(x) >= (1 - tau) (f(x0) - f_L)

where ``f(x0)`` is the value at the start and ``f_L`` the smallest value any solver found on that
pair within the budget.  Let ``t[p, s]`` be the fewest evaluations after which solver ``s``
solves pair ``p`` (``inf`` if it never does).

- The *data profile* (Moré and Wild 2009, eq. 2.7) of a solver is the fraction of pairs it solves
  within ``alpha (n_p + 1)`` evaluations, ``alpha`` counting budgets in "simplex gradients" (the
  cost of one forward-difference gradient).
- The *performance profile* (Dolan and Moré 2002) is the fraction of pairs on which the solver's
  ``t[p, s]`` is within a factor ``alpha`` of the best solver's; its value at ``alpha = 1`` is how
  often the solver is fastest, and its limit for large ``alpha`` how often it solves at all.

All functions are pure and work on plain arrays.

References
----------
.. [1] J. J. Moré and S. M. Wild, "Benchmarking derivative-free optimization algorithms",
   *SIAM Journal on Optimization* 20 (2009) 172-191.
.. [2] E. D. Dolan and J. J. Moré, "Benchmarking optimization software with performance
   profiles", *Mathematical Programming* 91 (2002) 201-213.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

TAUS = (1e-1, 1e-3, 1e-5, 1e-7)  # the accuracy levels of Moré and Wild (2009), section 2


def best_so_far(values: Sequence[float]) -> np.ndarray:
    """The smallest value seen after each evaluation; failures (NaN, inf) count as ``+inf``.

    >>> best_so_far([3.0, float("nan"), 1.0, 2.0]).tolist()
    [3.0, 3.0, 1.0, 1.0]
    """
    v = np.array(values, dtype=float)
    v[~np.isfinite(v)] = np.inf
    return np.minimum.accumulate(v) if v.size else v


def solved_after(history: np.ndarray, f0: float, f_low: float, tau: float) -> float:
    """Evaluations after which a best-so-far ``history`` passes the test for ``tau`` (or inf).

    ``history[k - 1]`` is the best value after ``k`` evaluations; ``f0`` the start's value.  When
    no solver improved on the start (``f_low >= f0``), every solver passes at its first
    evaluation (Moré and Wild 2009, the test with a zero right-hand side).

    >>> solved_after(np.array([10.0, 5.0, 1.2, 1.0]), 10.0, 1.0, 1e-1)
    3.0
    """
    if not (math.isfinite(f0) and math.isfinite(f_low)):
        return math.inf
    need = (1.0 - tau) * max(f0 - f_low, 0.0)
    passed = np.nonzero(f0 - history >= need)[0]
    return float(passed[0] + 1) if passed.size else math.inf


def solve_counts(
    histories: Sequence[Sequence[np.ndarray]], starts: Sequence[float], tau: float
) -> np.ndarray:
    """The matrix ``t[p, s]`` for one ``tau`` from best-so-far histories ``histories[p][s]``.

    ``f_L`` for each pair is the smallest value in any of its histories.
    """
    counts = np.full((len(histories), len(histories[0]) if histories else 0), math.inf)
    for p, (row, f0) in enumerate(zip(histories, starts)):
        finite = [h[-1] for h in row if h.size and math.isfinite(h[-1])]
        f_low = min([f0, *finite]) if math.isfinite(f0) else math.inf
        for s, history in enumerate(row):
            counts[p, s] = solved_after(history, f0, f_low, tau)
    return counts


def data_profile(counts: np.ndarray, sizes: Sequence[int], budgets: Sequence[float]) -> np.ndarray:
    """Fraction of pairs each solver solves within ``alpha (n + 1)`` evaluations, per ``alpha``.

    Returns an array of shape ``(len(budgets), solvers)``.

    >>> data_profile(np.array([[3.0, np.inf], [6.0, 4.0]]), [2, 1], [1, 2]).tolist()
    [[0.5, 0.0], [0.5, 0.5]]
    """
    if counts.shape[0] == 0:
        return np.zeros((len(budgets), counts.shape[1]))
    units = counts / (np.asarray(sizes, dtype=float)[:, None] + 1.0)
    return np.array([np.mean(units <= alpha, axis=0) for alpha in budgets])


def performance_profile(counts: np.ndarray, factors: Sequence[float]) -> np.ndarray:
    """Fraction of pairs on which each solver is within ``alpha`` of the fastest, per ``alpha``.

    Pairs that no solver solves count as failures for all (Dolan and Moré 2002 keep them in the
    denominator).  Returns an array of shape ``(len(factors), solvers)``.

    >>> performance_profile(np.array([[2.0, 4.0], [np.inf, 3.0]]), [1, 2, np.inf]).tolist()
    [[0.5, 0.5], [0.5, 1.0], [0.5, 1.0]]
    """
    if counts.shape[0] == 0:
        return np.zeros((len(factors), counts.shape[1]))
    fastest = np.min(counts, axis=1, keepdims=True)
    with np.errstate(invalid="ignore"):
        ratios = np.where(np.isfinite(counts), counts / fastest, np.inf)
    solved = np.isfinite(ratios)
    return np.array([np.mean(solved & (ratios <= alpha), axis=0) for alpha in factors])
