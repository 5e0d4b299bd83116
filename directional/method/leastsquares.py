"""Least squares on a residual vector through the driver: the objective and its Jacobians
(forward, central and extrapolated differences; the steps are `gaussnewton`'s).

The driver wants a number, so the objective it sees is `SumOfSquares`: it returns
``S(x) = sum r_i(x)**2`` and keeps each residual vector by the bytes of its point; the generators
here yield batches (purposes "jacobian", "gauss-newton") and read the vectors back.  A vector the
driver answered without calling the objective (a journal being replayed) is computed again, once,
and counted in ``SumOfSquares.recomputed``.

References
----------
.. [1] P. A. Brodtkorb, numdifftools (Richardson extrapolation of finite differences).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Generator
from dataclasses import dataclass

import numpy as np

from directional.errors import ObjectiveError
from directional.method import differences
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


class SumOfSquares:
    """The objective the driver sees: ``S(x)``, with each residual vector kept by point.

    ``sigma`` (None or one positive standard deviation per residual) divides the residuals.

    Raises (when called)
    --------------------
    ObjectiveError
        When the residuals are not a flat array of real numbers, change length between calls,
        or do not match ``sigma``.
    """

    def __init__(self, residuals: Residuals, sigma: np.ndarray | None) -> None:
        self.residuals = residuals
        self.sigma = sigma
        self.vectors: dict[bytes, np.ndarray] = {}
        self.size: int | None = None
        self.recomputed = 0

    def __call__(self, x: np.ndarray) -> float:
        key = x.tobytes()
        r = self._vector(self.residuals(x))
        self.vectors[key] = r
        return float(r @ r) if np.all(np.isfinite(r)) else math.nan

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
        if self.size is None:
            self.size = r.size
            if self.sigma is not None and self.sigma.size != r.size:
                raise ObjectiveError(
                    f"the residuals have {r.size} entries but sigma has {self.sigma.size}"
                )
        elif r.size != self.size:
            raise ObjectiveError(
                f"the residuals had {self.size} entries and now have {r.size}"
            )
        return r if self.sigma is None else r / self.sigma

    def vector(self, x: np.ndarray) -> np.ndarray | None:
        """The residual vector at user point ``x`` (None when its evaluation failed)."""
        key = x.tobytes()
        if key not in self.vectors:
            self.recomputed += 1
            try:
                self(x.copy())
            except ObjectiveError:
                raise
            except Exception:  # the objective's own failure, as the driver would see it
                return None
        r = self.vectors.get(key)
        return r if r is not None and np.all(np.isfinite(r)) else None


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
