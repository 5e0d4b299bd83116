"""Small frozen records that cross the boundary between the pure search and the driver.

The search yields a `Batch` of points to evaluate and receives their values (a float array; a failed
evaluation arrives as ``+inf``).  When the driver must end a search early (budget spent, time up,
Ctrl-C) it throws `Halt` into the generator, which returns its `Outcome` with that stop reason.
A generator that needs to know what it has cost yields `SPENT` instead of a batch and is sent
back what its search has cost so far (runs of the objective: points times replicates).  One
that needs the scatter of the replicates (each point run several times, `run.driver.Driver`
``replicates``) yields `SPREAD` and is sent back the pooled sample standard deviation of one run
over the points its search has been sent so far.
"""

from __future__ import annotations

import enum
import math
from dataclasses import dataclass, field

import numpy as np


class Stop(enum.Enum):
    """Why a search ended."""

    CONVERGED = "converged"
    BUDGET = "budget"
    INTERRUPTED = "interrupted"
    STALLED = "stalled"


class Status(enum.StrEnum):
    """How one evaluation ended; the values are the strings the journal stores."""

    OK = "ok"
    FAILED = "failed"  # an exception, NaN or +inf: the search receives +inf
    TIMED_OUT = "timed-out"  # an external program ran out of time (a failure too)
    INTERRUPTED = "interrupted"  # Ctrl-C while it ran: journaled, made again on resume


class Purpose(enum.StrEnum):
    """What the points of a batch are for (journal and reports); never changes what is done."""

    START = "start"
    LINE = "line"
    EXTRAPOLATE = "extrapolate"
    NOISE = "noise"
    HESSIAN = "hessian"
    SMOOTHNESS = "smoothness"
    ESCAPE = "escape"
    JACOBIAN = "jacobian"
    GAUSS_NEWTON = "gauss-newton"


class Check(enum.StrEnum):
    """The paid curvature check (the public ``check``: True is ESCALATING; False is none).

    The values are what a curvature record names as its source ("quick" or "extrapolated":
    ESCALATING ends as one of them) and what a problem file may say.
    """

    EXTRAPOLATED = "extrapolated"  # numdifftools' Richardson extrapolation, with error estimate
    QUICK = "quick"  # one central-difference stencil
    ESCALATING = "escalating"  # QUICK, then EXTRAPOLATED where an eigenvalue's sign is in doubt


class Verdict(enum.Enum):
    """What the curvature check says about the returned point."""

    MINIMUM = "minimum"
    SADDLE = "saddle"
    MAXIMUM = "maximum"
    FLAT = "flat"
    NONSMOOTH = "nonsmooth"
    NOISY = "noisy"  # the noise, not the objective, decided the check: no curvature verdict
    UNCHECKED = "unchecked"


class Halt(Exception):
    """Thrown into a search generator by the driver to end it with the given stop reason."""

    def __init__(self, stop: Stop, reason: str = "") -> None:
        super().__init__(stop, reason)
        self.stop = stop
        self.reason = reason


class Spent(enum.Enum):
    """The question "how many points has my search asked for?" (the sentinel `SPENT`)."""

    SPENT = "spent"


SPENT = Spent.SPENT


class Spread(enum.Enum):
    """The question "how much do the replicates of one point scatter?" (the sentinel `SPREAD`).

    The driver answers with the pooled sample standard deviation of one run
    (`method.replicates.pooled`) over the points the search has asked for and been sent, a float;
    ``nan`` when no point has two replicates that succeeded (always with one run per point).
    """

    SPREAD = "spread"


SPREAD = Spread.SPREAD


@dataclass(frozen=True, slots=True, kw_only=True)
class Batch:
    """Points the search wants evaluated, one per row, in the user's coordinates.

    ``purpose`` says what the points are for (`Purpose`), for the journal and for people reading
    it; it never changes what the driver does.  ``limit`` (None: the budget) lowers the budget
    for the points of this batch: the driver halts the search (BUDGET) rather than evaluate a
    point new to it once the search has asked for ``limit`` points (runs of the objective when
    each point is run several times: `run.driver.Driver` ``replicates``), so that a stage of a run can
    keep evaluations for the stages after it without anyone editing the budget.
    """

    points: np.ndarray
    purpose: str = Purpose.LINE
    limit: int | None = None

    def __init__(
        self, *, points: object, purpose: str = Purpose.LINE, limit: int | None = None
    ) -> None:
        # Written out, not the dataclass's own: that one sets each field through
        # `object.__setattr__` (then the points again), and a search makes a batch for nearly
        # every evaluation.  The fields' own setters do the same for half the work.
        array = np.array(points, dtype=float, copy=True)
        if array.ndim != 2 or array.shape[0] == 0:
            raise ValueError(f"a batch needs a (k, n) array with k >= 1, got shape {array.shape!r}")
        array.setflags(write=False)
        _set_points(self, array)
        _set_purpose(self, purpose)
        _set_limit(self, limit)

    @classmethod
    def row(cls, point: np.ndarray, purpose: str = Purpose.LINE) -> Batch:
        """The batch of the one point ``point``: a new float vector of length n that nobody else
        holds (the result of an arithmetic operation), which becomes the batch's read-only row
        without a copy or the checks of the constructor.  A search asks for one point at nearly
        every evaluation, and the copy and the keyword call were half of a batch's cost."""
        batch = object.__new__(cls)
        points = point.reshape(1, -1)
        points.setflags(write=False)
        _set_points(batch, points)
        _set_purpose(batch, purpose)
        _set_limit(batch, None)
        return batch


_set_points, _set_purpose, _set_limit = (
    Batch.__dict__[name].__set__ for name in ("points", "purpose", "limit")
)


Request = Batch | Spent | Spread  # what a generator of a run yields: points, or a question


@dataclass(frozen=True, slots=True, kw_only=True)
class Outcome:
    """What a search generator returns: its best point and what it learned on the way.

    ``curvatures[i]`` is the second derivative of the objective along ``directions[i]`` (a unit
    vector in scaled coordinates) measured by the last line search along it, ``nan`` if unknown.
    """

    point: np.ndarray
    value: float
    stop: Stop
    cycles: int
    directions: np.ndarray
    curvatures: np.ndarray
    reason: str = ""
    notes: tuple[str, ...] = field(default=())
    noise: float | None = None  # the noise level the search worked above (None: rounding only)


@dataclass(frozen=True, slots=True, kw_only=True)
class Curvature:
    """The Hessian at the returned point, in search coordinates, and what it says.

    Search coordinates are the parameters themselves, or their natural logarithms for log-scaled
    parameters.  ``error`` is the element-wise error estimate (None for the free estimate, which
    has none); ``source`` says where the matrix came from: "free" (the line searches' curvatures
    along conjugate directions, no extra evaluation), "quick" (central differences) or
    "extrapolated" (numdifftools' Richardson extrapolation).

    Added by the curvature check (`directional.method.curvature`): ``names`` labels the rows (the
    parameters not on a bound; ``log(name)`` for a log-scaled one); ``margin`` is the error bar
    of the smallest eigenvalue of the Hessian scaled to unit row maxima, the one the verdict
    turns on (dimensionless, see `directional.method.curvature`); ``undetermined`` names the parameter
    combinations along those eigenvectors; ``evaluations`` is what the check cost; ``free`` holds
    the free estimate the check started from; ``noise`` the noise level (standard deviation)
    the check's steps and error bars allowed for (nan when none was stated).
    """

    hessian: np.ndarray
    error: np.ndarray | None
    eigenvalues: np.ndarray
    eigenvectors: np.ndarray
    condition: float
    source: str
    names: tuple[str, ...] = ()
    margin: float = math.nan
    undetermined: tuple[str, ...] = ()
    evaluations: int = 0
    free: Curvature | None = None
    breaks: tuple[Break, ...] = ()
    noise: float = math.nan  # the noise level the check's error bars include (nan: none stated)


@dataclass(frozen=True, slots=True, kw_only=True)
class Break:
    """Where the curvature check found the objective not smooth (`directional.method.smoothness`).

    ``along`` names the parameter or combination (search coordinates, as ``Curvature.names``);
    ``parameters`` the parameters taking part.  ``kind``: "corner" (the one-sided slopes differ
    and both rise away from the point: still a minimum along it), "kink" (they differ and one
    falls), "edge" (the value jumps up on one side, the other is not lower: the point is the low
    edge of a jump) or "jump" (it jumps, and one side is lower).  ``slopes`` are the rates of
    rise away from the point, backward then forward along ``along`` per unit of it, read at
    ``step``; ``change`` is the size of the jump (0 for a kink).
    """

    along: str
    kind: str
    parameters: tuple[str, ...]
    slopes: tuple[float, float]
    change: float = 0.0
    step: float = math.nan
