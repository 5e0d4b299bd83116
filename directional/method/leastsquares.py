"""Least squares on a residual vector through the driver: the objective and its Jacobians
(forward, central and extrapolated differences; the steps are `gaussnewton`'s).

The driver wants a number, so the objective it sees is `SumOfSquares`: it returns
``S(x) = sum r_i(x)**2`` and keeps each residual vector by the bytes of its point; the generators
here yield batches (purposes "jacobian", "gauss-newton") and read the vectors back.  A replayed
journal hands its stored vectors in (`directional.run.journal` keeps each evaluation's vector);
only a vector the driver answered without calling the objective and that no journal holds (one
written before the vectors were kept) is computed again, once, and counted in
``SumOfSquares.recomputed``.

With replicates (each point run k times, `directional.method.replicates`) every run keeps its own
vector, matched to its evaluation by its sum of squares (bit for bit), and the value the search
sees is the sum of squares of the mean vector of the runs that succeeded (`SumOfSquares.combine`):
least squares on the averaged residuals.  That mean vector is what the Jacobians and the
Levenberg–Marquardt steps read.

References
----------
.. [1] P. A. Brodtkorb, numdifftools (Richardson extrapolation of finite differences).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Generator, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from directional.errors import ObjectiveError
from directional.method import differences
from directional.method.replicates import combined_vector
from directional.method.space import Space
from directional.records import Batch, Halt, Purpose, Stop

Residuals = Callable[[np.ndarray], object]

EPSILON = float(np.finfo(float).eps)
DIFFERENCE_STEP = EPSILON ** (1.0 / 3.0)  # central differences: truncation h² vs rounding eps/h
ONE_SIDED_STEP = EPSILON ** 0.5  # one-sided differences: truncation h vs rounding eps/h
JACOBIAN_STEP = 1e-3  # largest step of numdifftools' extrapolated Jacobian (scaled coordinates)


# ----------------------------------------------------------------------------- the objective


def sum_of_squares(result: object) -> float:
    """The value of a residual vector: the sum of its squares (nan when it is not numeric).

    For reports and the progress bar, which must not fail; the search's own objective is
    `SumOfSquares`, which raises on a result that is not a flat array.

    >>> sum_of_squares([3.0, 4.0])
    25.0
    """
    try:
        r = np.asarray(result, dtype=float).ravel()
    except (TypeError, ValueError):
        return math.nan
    with np.errstate(over="ignore", invalid="ignore"):  # inf when it overflows: no warning
        return float(r @ r)


class WrongLength(ValueError):
    """A residual vector whose length is not the run's: that evaluation fails (the driver records
    the message as its reason and the search steps around the point), the run goes on."""


class SumOfSquares:
    """The objective the driver sees: ``S(x)``, with each residual vector kept by point.

    ``sigma`` (None, one positive standard deviation for every residual, or one per residual)
    divides the residuals.  The length of the run's vectors is ``sigma``'s when it has one per
    residual, else the first vector's (the start's).
    ``replicates`` above 1 keeps the vector of every run of a point in ``runs`` (with its sum of
    squares); ``vectors`` then holds each point's mean vector once `combine` has made it.

    Raises (when called)
    --------------------
    ObjectiveError
        When the residuals are not a flat array of real numbers (a programming error).
    WrongLength
        When a vector's length is not the run's: a failed evaluation, not an abort.
    """

    def __init__(self, residuals: Residuals, sigma: np.ndarray | None, replicates: int = 1) -> None:
        self.residuals = residuals
        self.sigma = sigma
        self.replicates = replicates
        self.vectors: dict[bytes, np.ndarray] = {}
        self.runs: dict[bytes, list[tuple[float, np.ndarray]]] = {}
        self.size: int | None = None
        self.recomputed = 0
        self.failed: set[bytes] = set()

    def __call__(self, x: np.ndarray) -> float:
        key = x.tobytes()
        try:
            r = self._vector(self.residuals(x))
        except Exception:
            self.failed.add(key)  # asked for its vector later: None, not a second call
            raise
        value = float(r @ r) if np.all(np.isfinite(r)) else math.nan
        if self.replicates > 1:
            self.runs.setdefault(key, []).append((value, r))  # one list append: thread-safe
        else:
            self.vectors[key] = r
        return value

    def spread(self, points: Iterable[np.ndarray]) -> float | None:
        """The noise of one entry of the mean vector the search sees, from the replicates.

        The pooled sample variance of the runs' entries about their point's mean, over the
        ``points`` (user units; those the search has been sent, so that a resumed run, which
        knows every stored run from the outset, decides the same) with two or more finite runs
        and every entry (each point gives ``m (k - 1)``
        degrees of freedom), divided by ``k`` for the mean of ``k`` runs (the pooled variance,
        common practice, e.g. Box, Hunter & Hunter, *Statistics for Experimenters*, 2005,
        sec. 3.1).  None without replicates or without two runs of any point.
        """
        if self.replicates < 2:
            return None
        squares, freedom, counts = 0.0, 0, []
        for x in points:
            runs = self.runs.get(np.asarray(x, dtype=float).tobytes(), [])
            good = [r for _, r in runs if r.size and np.all(np.isfinite(r))]
            if len(good) < 2 or len({r.size for r in good}) != 1:
                continue
            stack = np.stack(good)
            squares += float(np.sum((stack - stack.mean(axis=0)) ** 2))
            freedom += stack.shape[1] * (len(good) - 1)
            counts.append(len(good))
        if freedom == 0:
            return None
        return math.sqrt(squares / freedom / float(np.mean(counts)))

    def journaled(self, evaluation: object) -> np.ndarray | None:
        """The residual vector of one evaluation (a `run.driver.Evaluation`), for the journal."""
        key = evaluation.point.tobytes()  # type: ignore[attr-defined]
        if self.replicates == 1:
            return self.vectors.get(key)
        return _matching(self.runs.get(key, ()), [evaluation.value])[0]  # type: ignore[attr-defined]

    def combine(self, point: np.ndarray, values: list[float]) -> float:
        """The value of a replicated point: the sum of squares of its runs' mean vector.

        ``values`` are the driver's values of the runs (failures ``inf``); each is matched to
        the vector of the run that gave it.  ``inf`` when no run succeeded.
        """
        key = point.tobytes()
        mean = combined_vector(_matching(self.runs.get(key, ()), values))
        if mean is None:
            return math.inf
        self.vectors[key] = mean
        return float(mean @ mean)

    def _vector(self, result: object) -> np.ndarray:
        try:
            r = (
                None if result is None or isinstance(result, str | bytes)
                else np.array(result, dtype=float).reshape(-1)
            )
        except (TypeError, ValueError):
            r = None
        if r is None or np.ndim(result) > 1 or r.size == 0:
            text = repr(result)
            raise ObjectiveError(
                "residuals must return a flat array of real numbers, got "
                + (text if len(text) <= 80 else text[:77] + "...")
            )
        if self.sigma is not None and self.sigma.ndim == 1 and self.sigma.size != r.size:
            raise WrongLength(f"the residuals have {r.size} entries but sigma has {self.sigma.size}")
        if self.size is None:
            self.size = r.size
        elif r.size != self.size:
            raise WrongLength(f"the residuals had {self.size} entries and now have {r.size}")
        return r if self.sigma is None else r / self.sigma

    def vector(self, x: np.ndarray) -> np.ndarray | None:
        """The residual vector at user point ``x`` (None when its evaluation failed)."""
        key = x.tobytes()
        if key in self.failed and key not in self.vectors:
            return None
        if key not in self.vectors and key not in self.runs:
            self.recomputed += 1
            try:
                self(x.copy())
            except ObjectiveError:
                raise
            except Exception:  # the objective's own failure, as the driver would see it
                return None
        if key not in self.vectors and key in self.runs:  # replicates the driver did not combine
            mean = combined_vector([r for _, r in self.runs[key]])
            if mean is not None:
                self.vectors[key] = mean
        r = self.vectors.get(key)
        return r if r is not None and np.all(np.isfinite(r)) else None


def _matching(
    runs: Sequence[tuple[float, np.ndarray]], values: Sequence[float]
) -> list[np.ndarray | None]:
    """For each value, the vector of a run with that sum of squares (each run used once)."""
    left = list(runs)
    found: list[np.ndarray | None] = []
    for value in values:
        for i, (made, r) in enumerate(left):
            if made == value or not (math.isfinite(made) or math.isfinite(value)):
                found.append(r)
                del left[i]
                break
        else:
            found.append(None)  # the run raised: it has no vector
    return found


# ----------------------------------------------------------------------------- where the steps end


@dataclass(frozen=True, slots=True, kw_only=True)
class Polished:
    """Where the Gauss–Newton steps (`gaussnewton`) ended (scaled point), why, and the Jacobian there."""

    point: np.ndarray
    value: float
    stop: Stop
    reason: str
    steps: int
    jacobian: np.ndarray | None = None  # at ``point`` (scaled coordinates), when one was made
    jacobian_kind: str = ""  # how: "forward", "central" (differences) or "secant" (Broyden 1965)
    noise: float | None = None  # the residuals' noise the steps noticed (0: measured, none found)


def room_to_bounds(space: Space, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distances in scaled coordinates from ``u`` down to the lower and up to the upper bounds."""
    return u - space.lower_u, space.upper_u - u


def magnitude(space: Space, u: np.ndarray) -> np.ndarray:
    """The size of each coordinate of scaled point ``u`` in scaled units, at least 1.

    ``x = origin + scale * u``, so ``|origin / scale + u|`` is ``|x| / scale``: a difference step
    or a tolerance relative to it is relative to the parameter itself (Moré 1978's ``|x|``).
    """
    return np.maximum(np.abs(space.origin / space.scale + u), 1.0)


def central_jacobian(
    space: Space,
    squares: SumOfSquares,
    u: np.ndarray,
    step: float | np.ndarray = DIFFERENCE_STEP,
    point_tolerance: float = 1e-6,
) -> Generator[Batch, np.ndarray, np.ndarray | None]:
    """Jacobian of the residual vector in scaled coordinates, by central differences (one batch).

    The step is ``step`` scaled units (``eps^(1/3)``: truncation h² against rounding eps/h), less
    where a bound is nearer; a parameter within ``10 * point_tolerance`` of a bound gets a
    one-sided difference of the same step into the interior (common practice, no source; the
    point itself is known, so that column costs one evaluation).  Where one end of a column
    failed, the column is the one-sided difference from the other; None when both failed.
    """
    n = space.size
    below, above = room_to_bounds(space, u)
    bound = (below <= 10.0 * point_tolerance) | (above <= 10.0 * point_tolerance)
    h = np.minimum(step, np.minimum(below, above))
    plus = np.where(bound, np.where(above >= below, np.minimum(step, above), 0.0), h)
    minus = np.where(bound, np.where(above >= below, 0.0, -np.minimum(step, below)), -h)
    if np.any(plus == minus):
        return None  # a parameter with no room at all between its bounds
    ends = [(j, e) for e in (plus, minus) for j in range(n) if e[j] != 0.0]
    offsets = np.zeros((len(ends), n))
    for row, (j, e) in enumerate(ends):
        offsets[row, j] = e[j]
    points = space.to_user(u + offsets)
    values = yield Batch(points=points, purpose=Purpose.JACOBIAN)
    here = squares.vector(space.to_user(u))
    vectors = [[here, here] for _ in range(n)]  # the vectors at the ends +, - of each column
    for (j, e), x, value in zip(ends, points, values):
        vectors[j][0 if e is plus else 1] = squares.vector(x) if np.isfinite(value) else None
    columns = []
    for j in range(n):
        (rp, hp), (rm, hm) = (vectors[j][0], plus[j]), (vectors[j][1], minus[j])
        if rp is None and rm is not None:  # a failed end: one-sided from the other one
            rp, hp = here, 0.0
        elif rm is None and rp is not None:
            rm, hm = here, 0.0
        if rp is None or rm is None or hp == hm:
            return None
        columns.append((rp - rm) / (hp - hm))
    return np.column_stack(columns)


def forward_jacobian(
    space: Space, squares: SumOfSquares, u: np.ndarray, r: np.ndarray, step: float
) -> Generator[Batch, np.ndarray, np.ndarray | None]:
    """Jacobian of the residual vector in scaled coordinates by forward differences.

    ``r`` is the vector at ``u``, so a column costs one evaluation (one batch for all).  The step
    is ``step`` times the size of the coordinate (at least one scaled unit; ``sqrt(eps)`` balances
    truncation against rounding, common practice, no source), taken backward where the upper
    bound is closer than that (`magnitude`).  A column whose point failed is tried once the other
    way (a second batch); None when that fails too.
    """
    n = space.size
    below, above = room_to_bounds(space, u)
    h = step * magnitude(space, u)
    h = np.where(above >= h, h, np.where(below >= h, -h, np.where(above >= below, above, -below)))
    if np.any(h == 0.0):
        return None  # a parameter with no room at all between its bounds
    columns: list[np.ndarray | None] = [None] * n
    todo = np.arange(n)
    for attempt in range(2):
        points = space.to_user(u + np.diag(h)[todo])
        values = yield Batch(points=points, purpose=Purpose.JACOBIAN)
        for j, x, value in zip(todo, points, values):
            rj = squares.vector(x) if np.isfinite(value) else None
            columns[j] = None if rj is None else (rj - r) / h[j]
        todo = np.array([j for j in range(n) if columns[j] is None], dtype=int)
        if todo.size == 0:
            return np.column_stack(columns)
        flipped = -h[todo]
        room = np.where(flipped > 0.0, above[todo], below[todo])
        if attempt == 1 or np.any(np.abs(flipped) > room):
            return None
        h[todo] = flipped
    return None


def held_at_bounds(space: Space, u: np.ndarray, jacobian: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Parameters at a bound that the gradient ``2 Jᵀ r`` pushes outward: held there this step."""
    below, above = room_to_bounds(space, u)
    gradient = jacobian.T @ r
    return ((below < ONE_SIDED_STEP) & (gradient > 0.0)) | ((above < ONE_SIDED_STEP) & (gradient < 0.0))


# ----------------------------------------------------------------------------- extrapolated Jacobian


def extrapolated_jacobian(
    space: Space, squares: SumOfSquares, u: np.ndarray, free: np.ndarray
) -> Generator[Batch, np.ndarray, np.ndarray | None]:
    """numdifftools' extrapolated central-difference Jacobian (scaled coordinates), one batch.

    The stencil is recorded in a first pass (`differences.Recorder`), evaluated as one batch
    (purpose "jacobian"), and read back in a second, as for the Hessian
    (`hessian.extrapolated_hessian`).  Columns of
    parameters not ``free`` are zero; None when an evaluation failed.
    """
    columns = np.flatnonzero(free)
    if columns.size == 0:  # every parameter on a bound: nothing to differentiate
        return np.zeros((squares.size or 0, space.size))
    below, above = room_to_bounds(space, u)
    steps = np.minimum(JACOBIAN_STEP, np.minimum(below, above)[columns])
    size = squares.size or 1
    table = differences.Recorder(np.zeros(size))
    for _ in range(3):
        table.missing = {}
        estimate = differences.jacobian(table, steps)
        if not table.missing:
            if not np.all(np.isfinite(estimate)):
                return None
            jacobian = np.zeros((estimate.shape[0], space.size))
            jacobian[:, columns] = estimate
            return jacobian
        offsets = np.zeros((len(table.missing), space.size))
        offsets[:, columns] = np.array(list(table.missing.values()))
        points = space.to_user(u + offsets)
        try:
            values = yield Batch(points=points, purpose=Purpose.JACOBIAN)
        except Halt:
            return None
        for key, x, value in zip(table.missing, points, values):
            r = squares.vector(x) if math.isfinite(value) else None
            table.known[key] = np.full(size, np.nan) if r is None else r
    return None
