"""Replicates: each point run k times, the search given their mean, the noise read off their scatter.

Theory of operation.  A stochastic objective (a Monte Carlo simulation, a measurement loop)
returns a different value at each run of one point.  Asked for ``replicates = k``, the driver
(`directional.run.driver`) runs every point k times, each run a separate evaluation (a pool runs
them at once, the journal keeps each), and sends the search the mean, whose standard deviation
is ``sigma / sqrt(k)`` when the runs are independent with standard deviation ``sigma``.  The
search itself does not know: it sees an objective k times less noisy in variance.

The scatter of the replicates measures the noise directly, with no difference table: at one
point, the sample standard deviation ``s`` of the k values (divisor k - 1) estimates ``sigma``
with k - 1 degrees of freedom; over many points, the pooled estimate

    s_pooled**2 = sum_points sum_runs (f_ij - mean_i)**2 / sum_points (k_i - 1)

has the degrees of freedom of all points together (the pooled variance of a one-way layout;
common practice, e.g. D. C. Montgomery, *Design and Analysis of Experiments*, ch. 3).  Its
relative standard error is about ``1 / sqrt(2 * dof)`` for normal noise (from memory: the
variance of a chi-square with dof degrees of freedom is 2 dof).  The noise of what the search
sees is ``s / sqrt(k)``.

Failed replicates (decided here, documented in the README): the value of a point is the mean of
the replicates that succeeded; the point fails (``+inf``) only when every replicate failed, and
one replicate at ``-inf`` makes the point ``-inf`` (the objective is unbounded below there).  A
simulation that fails now and then for one random stream should not lose the point; the runs
that failed stay in the journal with their error, and the summary counts the points whose mean
lacks some.  A failure that depends on the noise (the large draws fail, say) biases such a mean:
the count in the summary is there so that the user can judge.

Means are correctly rounded sums (`math.fsum`) divided by the count, and spreads are taken over
the sorted values, so that the result does not depend on the order in which the runs came back:
a pool returns them in any order, a resumed journal replays them in the order they were written,
and replay compares the search's points bit for bit.
"""

from __future__ import annotations

import math
from collections.abc import Generator, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from directional.errors import ProblemError
from directional.method.noise import noise_level
from directional.method.space import Space
from directional.records import SPREAD, Batch, Halt, Purpose, Request


@dataclass(frozen=True, slots=True, kw_only=True)
class Spread:
    """The noise of one run and of the mean of ``replicates`` runs, from the replicates' scatter.

    ``run`` is the pooled sample standard deviation of one run (objective units), ``mean`` is
    ``run / sqrt(replicates)``, the noise of the values the search saw; ``points`` how many
    points had at least two replicates that succeeded, ``degrees_of_freedom`` the sum of their
    counts less one.
    """

    run: float
    mean: float
    replicates: int
    points: int
    degrees_of_freedom: int

    def describe(self) -> str:
        """One line for people."""
        return (
            f"noise from the {self.replicates} replicates of each point: {self.run:.3g} for one "
            f"run (pooled sample standard deviation over {self.points} points, "
            f"{self.degrees_of_freedom} degrees of freedom), {self.mean:.3g} for the mean the "
            "search used"
        )


def replicate_count(replicates: object, key: str = "replicates") -> int:
    """Validate the number of runs per point: a whole number of at least 1.

    >>> replicate_count(4)
    4

    Raises
    ------
    ProblemError
        For 0, a negative number, or anything that is not a whole number (naming ``key``).
    """
    if isinstance(replicates, bool) or not isinstance(replicates, int | np.integer):
        raise ProblemError(f"{key} must be a whole number of runs per point, got {replicates!r}")
    if replicates < 1:
        raise ProblemError(f"{key} must be at least 1, got {replicates!r}")
    return int(replicates)


def combined(values: Sequence[float]) -> float:
    """The value of a point from its replicates: the mean of those that succeeded.

    ``+inf`` (failed) when none did, ``-inf`` when one is ``-inf``; independent of the order.

    >>> combined([1.0, 2.0, float("inf"), 4.0])
    2.3333333333333335
    """
    if any(v == -math.inf for v in values):
        return -math.inf
    good = [float(v) for v in values if math.isfinite(v)]
    if not good:
        return math.inf
    return math.fsum(good) / len(good)


def combined_vector(vectors: Sequence[np.ndarray | None]) -> np.ndarray | None:
    """The mean of the residual vectors that are finite, entry by entry (None when none is).

    Each entry is a correctly rounded sum divided by the count, so the order does not matter.
    """
    good = [np.asarray(v, dtype=float) for v in vectors if v is not None and np.all(np.isfinite(v))]
    if not good:
        return None
    stack = np.stack(good)
    return np.array([math.fsum(column) for column in stack.T]) / len(good)


def pooled(groups: Iterable[Sequence[float]], replicates: int) -> Spread | None:
    """The pooled spread of the replicates of many points (module docstring); None without any.

    Groups with fewer than two finite values add nothing.

    >>> s = pooled([[1.0, 3.0], [10.0, 12.0]], 2)
    >>> s.run, s.points, s.degrees_of_freedom
    (1.4142135623730951, 2, 2)
    """
    squares: list[float] = []
    freedom = points = 0
    for group in groups:
        good = np.sort(np.array([v for v in group if math.isfinite(v)], dtype=float))
        if good.size < 2:
            continue
        squares.append(math.fsum((good - math.fsum(good) / good.size) ** 2))
        freedom += good.size - 1
        points += 1
    if freedom == 0:
        return None
    run = math.sqrt(math.fsum(squares) / freedom)
    return Spread(
        run=run, mean=run / math.sqrt(replicates), replicates=replicates, points=points,
        degrees_of_freedom=freedom,
    )


def planned_level(
    space: Space, noise: float | str | None, replicates: int
) -> Generator[Request, object, tuple[float | None, tuple[str, ...]]]:
    """The noise level to plan with, and a note; from the replicates where the user gave none.

    A generator for the driver.  With ``replicates`` of 2 or more and ``noise`` None or
    ``"estimate"``, the start point is asked for (its k runs are those the search starts from:
    nothing extra is spent) and the level is the sample standard deviation of its replicates
    divided by ``sqrt(k)``, the noise of the mean the search sees.  A number given as ``noise``
    wins; with one run per point this is `directional.method.noise.noise_level`.
    """
    if replicates < 2 or not (noise is None or noise == "estimate"):
        return (yield from noise_level(space, noise))
    try:
        yield Batch(points=space.to_user(np.zeros(space.size))[None, :], purpose=Purpose.START)
    except Halt:
        return None, ("no noise level from the replicates: the run ended at the start",)
    run = float((yield SPREAD))  # type: ignore[arg-type]
    if not math.isfinite(run):
        return None, (
            "no noise level from the replicates at the start (fewer than two succeeded); "
            "rounding assumed",
        )
    level = run / math.sqrt(replicates)
    return level, (
        f"noise level {level:.3g} for the mean of {replicates} replicates, from their sample "
        f"standard deviation {run:.3g} at the start; it floors the tolerances and the Hessian steps",
    )


def pooled_level(
    noise: float | str | None, replicates: int, level: float | None
) -> Generator[Request, object, float | None]:
    """The noise level for the check, from every point the search has been sent so far.

    A generator for the driver, to run after the search: with replicates and no ``noise`` given
    as a number, the pooled spread of one run over all the search's points (`pooled`) divided by
    sqrt(k), far better determined than the start's alone; otherwise ``level`` as it was.
    Nothing is evaluated.
    """
    if replicates < 2 or not (noise is None or noise == "estimate"):
        return level
    run = float((yield SPREAD))  # type: ignore[arg-type]
    return run / math.sqrt(replicates) if math.isfinite(run) else level
