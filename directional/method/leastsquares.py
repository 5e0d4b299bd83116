"""Least squares on a residual vector through the driver: the objective, Jacobians, and
Levenberg–Marquardt steps.

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
.. [1] K. Levenberg, "A method for the solution of certain non-linear problems in least squares",
   *Quarterly of Applied Mathematics* 2 (1944) 164-168.
.. [2] D. W. Marquardt, "An algorithm for least-squares estimation of nonlinear parameters",
   *Journal of the Society for Industrial and Applied Mathematics* 11 (1963) 431-441.
.. [3] P. A. Brodtkorb, numdifftools (Richardson extrapolation of finite differences).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Generator, Sequence
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


# ----------------------------------------------------------------------------- Levenberg–Marquardt


@dataclass(frozen=True, slots=True, kw_only=True)
class Polished:
    """Where the Levenberg–Marquardt steps ended (scaled point) and why."""

    point: np.ndarray
    value: float
    stop: Stop
    reason: str
    steps: int
    jacobian: np.ndarray | None = None  # at ``point`` (scaled coordinates), when one was made


def room_to_bounds(space: Space, u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distances in scaled coordinates from ``u`` down to the lower and up to the upper bounds."""
    return u - space.lower_u, space.upper_u - u


def difference_jacobian(
    space: Space, squares: SumOfSquares, u: np.ndarray
) -> Generator[Batch, np.ndarray, np.ndarray | None]:
    """Jacobian of the residual vector in scaled coordinates, by finite differences (one batch).

    Central differences with the step ``eps^(1/3)``; a forward or backward difference with the
    step ``sqrt(eps)`` where a bound is closer than that (common practice, no source; the point
    itself is known, so a one-sided column costs one evaluation).  None when an evaluation failed.
    """
    below, above = room_to_bounds(space, u)
    plus = np.zeros(space.size)
    minus = np.zeros(space.size)
    for j in range(space.size):
        if below[j] >= DIFFERENCE_STEP and above[j] >= DIFFERENCE_STEP:
            plus[j], minus[j] = DIFFERENCE_STEP, -DIFFERENCE_STEP
        elif above[j] >= below[j]:
            plus[j] = min(ONE_SIDED_STEP, above[j])
        else:
            minus[j] = -min(ONE_SIDED_STEP, below[j])
    offsets = np.vstack([np.diag(plus), np.diag(minus)])
    points = space.to_user(u + offsets)
    values = yield Batch(points=points, purpose=Purpose.JACOBIAN)
    if not np.all(np.isfinite(values)):
        return None
    columns = []
    for j in range(space.size):
        rp, rm = squares.vector(points[j]), squares.vector(points[space.size + j])
        if rp is None or rm is None or plus[j] == minus[j]:
            return None
        columns.append((rp - rm) / (plus[j] - minus[j]))
    return np.column_stack(columns)


def _held(space: Space, u: np.ndarray, jacobian: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Parameters at a bound that the gradient ``2 Jᵀ r`` pushes outward: held there this step."""
    below, above = room_to_bounds(space, u)
    gradient = jacobian.T @ r
    return ((below < ONE_SIDED_STEP) & (gradient > 0.0)) | ((above < ONE_SIDED_STEP) & (gradient < 0.0))


def levenberg_marquardt(
    space: Space,
    squares: SumOfSquares,
    u0: np.ndarray,
    value: float,
    *,
    iterations: int = 100,
    tolerance: float = 1e-10,
) -> Generator[Batch, np.ndarray, Polished]:
    """Levenberg–Marquardt steps from scaled point ``u0`` until a step is below ``tolerance``.

    Each step solves ``min |J d + r|² + lambda |D d|²`` with ``D² = diag(JᵀJ)`` (Marquardt 1963),
    as the linear least-squares problem ``[J; sqrt(lambda) D] d = [-r; 0]`` so that JᵀJ is never
    formed; a step that lowers S is taken and lambda divided by 10, otherwise lambda is multiplied
    by 10 and the step solved again (ibid.).  Steps are clipped to the bounds, and a parameter at
    a bound that the gradient pushes outward is held there for the step.
    """
    u, s_value = u0.copy(), value
    lam = 1e-3
    steps = 0
    try:
        r = squares.vector(space.to_user(u))
        if r is None:
            return Polished(point=u, value=s_value, stop=Stop.STALLED, reason="no residuals", steps=0)
        for _ in range(iterations):
            jacobian = yield from difference_jacobian(space, squares, u)
            if jacobian is None:
                return Polished(point=u, value=s_value, stop=Stop.STALLED, steps=steps,
                                reason="an evaluation for the Jacobian failed")
            moving = jacobian * ~_held(space, u, jacobian, r)
            scale = np.sqrt(np.sum(jacobian**2, axis=0))
            scale = np.maximum(scale, 1e-12 * max(float(scale.max()), 1e-300))
            while True:
                d = _marquardt_step(moving, r, lam, scale)
                trial = np.clip(u + d, space.lower_u, space.upper_u)
                move = float(np.max(np.abs(trial - u)))
                if move <= tolerance:
                    return Polished(point=u, value=s_value, stop=Stop.CONVERGED, steps=steps,
                                    reason="", jacobian=jacobian)
                x = space.to_user(trial)
                values = yield Batch(points=x[None, :], purpose=Purpose.GAUSS_NEWTON)
                if values[0] < s_value:
                    u, s_value, lam = trial, float(values[0]), max(lam / 10.0, 1e-15)
                    r = squares.vector(x)
                    steps += 1
                    break
                lam *= 10.0
                if lam > 1e16:
                    return Polished(point=u, value=s_value, stop=Stop.CONVERGED, steps=steps,
                                    reason="", jacobian=jacobian)
        return Polished(point=u, value=s_value, stop=Stop.STALLED, steps=steps,
                        reason=f"no convergence in {iterations} Levenberg-Marquardt steps")
    except Halt as halt:
        return Polished(point=u, value=s_value, stop=halt.stop, reason=halt.reason, steps=steps)


def _marquardt_step(jacobian: np.ndarray, r: np.ndarray, lam: float, scale: np.ndarray) -> np.ndarray:
    used = np.any(jacobian != 0.0, axis=0)
    j = jacobian[:, used]
    a = np.vstack([j, math.sqrt(lam) * np.diag(scale[used])])
    b = np.concatenate([-r, np.zeros(j.shape[1])])
    d = np.zeros(jacobian.shape[1])
    d[used] = np.linalg.lstsq(a, b, rcond=None)[0]
    return d


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
