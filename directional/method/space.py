"""The map between the user's parameters and the scaled coordinates the search works in.

Each parameter is searched in ``u = (y - y0) / s`` where ``y`` is the value itself or, for a
log-scaled parameter, its natural logarithm; ``y0`` is the start and ``s`` the scale: the width of
the bounds in ``y`` when both are finite, else ``|y0|``, else 1.  So ``u = 0`` is the start, and a
unit step in ``u`` is a step the size of the problem in every coordinate (common practice, no
source).  Mapping back is clipped to the bounds, and a coordinate the search never moved maps back
to the user's start bit for bit.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from directional.errors import ProblemError
from directional.parameters import Parameter


@dataclass(frozen=True, slots=True, kw_only=True)
class Space:
    """Scaled coordinates for a list of parameters (see the module docstring)."""

    parameters: tuple[Parameter, ...]
    start: np.ndarray  # user coordinates
    lower: np.ndarray
    upper: np.ndarray
    log: np.ndarray  # bool per parameter
    origin: np.ndarray  # y0
    scale: np.ndarray  # s
    lower_u: np.ndarray
    upper_u: np.ndarray
    # Shortcuts of the hot path (`to_user` runs once per evaluation), decided once here: no
    # bound at all, and a map back that needs no special case (no log scale, no start of -0.0,
    # whose sum with a zero step would lose its sign).  They change no result, only the work.
    unbounded: bool = field(init=False, repr=False, compare=False)
    direct: bool = field(init=False, repr=False, compare=False)
    # ... and a map that is the identity but for the sign of a zero (every start 0.0, every
    # scale 1, no bound): ``origin + scale * u`` is then ``u + 0.0`` bit for bit
    identity: bool = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        unbounded = bool((self.lower == -np.inf).all() and (self.upper == np.inf).all())
        negative_zero = bool(((self.start == 0.0) & np.signbit(self.start)).any())
        object.__setattr__(self, "unbounded", unbounded)
        object.__setattr__(self, "direct", not self.log.any() and not negative_zero)
        zero = bool((self.origin == 0.0).all() and not np.signbit(self.origin).any())
        identity = unbounded and self.direct and zero and bool((self.scale == 1.0).all())
        object.__setattr__(self, "identity", identity)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    @property
    def size(self) -> int:
        return len(self.parameters)

    def to_user(self, u: np.ndarray) -> np.ndarray:
        """Map scaled points (shape (..., n)) to user coordinates, clipped to the bounds."""
        u = np.asarray(u, dtype=float)
        if self.identity:  # 1 * u is u, and 0.0 + u is u + 0.0 (which turns -0.0 into 0.0)
            return u + 0.0
        x = self.origin + self.scale * u
        if self.direct:  # x is the start bit for bit where u is 0, and lies inside the bounds
            return x if self.unbounded else np.minimum(np.maximum(x, self.lower), self.upper)
        if self.log.any():
            x = np.where(self.log, np.exp(np.where(self.log, x, 0.0)), x)
        x = np.minimum(np.maximum(x, self.lower), self.upper)
        return np.where(u == 0.0, self.start, x)

    def to_scaled(self, x: np.ndarray) -> np.ndarray:
        """Map user points (shape (..., n)) to scaled coordinates."""
        x = np.asarray(x, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            y = np.where(self.log, np.log(np.where(self.log, x, 1.0)), x)
        return (y - self.origin) / self.scale

    def segment(self, u: np.ndarray, direction: np.ndarray) -> tuple[float, float]:
        """The feasible range ``[lo, hi]`` of ``t`` for ``u + t * direction`` (``lo <= 0 <= hi``)."""
        lo, hi = -np.inf, np.inf
        if self.unbounded:
            return lo, hi
        moving = direction != 0.0
        if moving.any():
            d = direction[moving]
            to_lower = (self.lower_u[moving] - u[moving]) / d
            to_upper = (self.upper_u[moving] - u[moving]) / d
            lo = float(np.max(np.minimum(to_lower, to_upper)))
            hi = float(np.min(np.maximum(to_lower, to_upper)))
        return min(lo, 0.0), max(hi, 0.0)

    def on_bound(self, x: np.ndarray, tolerance: float) -> np.ndarray:
        """Which parameters of the user point ``x`` lie within ``tolerance`` (scaled) of a bound."""
        u = self.to_scaled(x)
        return (u - self.lower_u <= tolerance) | (self.upper_u - u <= tolerance)


def space_from_parameters(parameters: Sequence[Parameter]) -> Space:
    """Build the scaled coordinates for validated parameters."""
    if len(parameters) == 0:
        raise ProblemError("start must name at least one parameter, got none")
    names = [p.name for p in parameters]
    if len(set(names)) < len(names):
        doubled = sorted({n for n in names if names.count(n) > 1})
        raise ProblemError(f"parameter names must be unique, {doubled[0]!r} appears twice")
    start = np.array([p.start for p in parameters])
    lower = np.array([p.lower for p in parameters])
    upper = np.array([p.upper for p in parameters])
    log = np.array([p.scale == "log" for p in parameters])
    if log.any():
        with np.errstate(divide="ignore"):
            ylo = np.where(log, np.log(np.where(log, lower, 1.0)), lower)
            yhi = np.where(log, np.log(np.where(log, upper, 1.0)), upper)
        origin = np.where(log, np.log(np.where(log, start, 1.0)), start)
    else:  # what the selections above give when no parameter is log-scaled, without the logs
        ylo, yhi, origin = lower, upper, start.copy()
    width = yhi - ylo
    scale = np.where(
        np.isfinite(width), width, np.where(origin != 0.0, np.abs(origin), 1.0)
    )
    return Space(
        parameters=tuple(parameters),
        start=start,
        lower=lower,
        upper=upper,
        log=log,
        origin=origin,
        scale=scale,
        lower_u=(ylo - origin) / scale,
        upper_u=(yhi - origin) / scale,
    )


def build_space(
    start: object,
    bounds: object = None,
    names: Sequence[str] | None = None,
) -> Space:
    """Validate the public ``start``/``bounds``/``names`` arguments and build a `Space`.

    ``start`` is an array-like of numbers or a sequence of `Parameter`; ``bounds`` is None or one
    ``(lower, upper)`` pair per parameter (``None`` or ``inf`` for no bound).

    Raises
    ------
    ProblemError
        Naming the parameter, for any start, bound or name that cannot be searched.
    """
    if isinstance(start, Parameter) or (
        isinstance(start, Sequence) and len(start) > 0 and all(isinstance(p, Parameter) for p in start)
    ):
        parameters = [start] if isinstance(start, Parameter) else list(start)
        if bounds is not None or names is not None:
            raise ProblemError("give bounds and names inside each Parameter, not as arguments too")
        return space_from_parameters(parameters)
    if start is None or isinstance(start, str | bytes):
        raise ProblemError(f"start must be numbers or a list of Parameter, got {start!r}")
    try:
        x0 = np.array(start, dtype=float)
    except (TypeError, ValueError):
        raise ProblemError(f"start must be numbers or a list of Parameter, got {start!r}") from None
    if x0.ndim == 0:
        x0 = x0.reshape(1)
    if x0.ndim != 1 or x0.size == 0:
        raise ProblemError(f"start must be a flat list of numbers, got shape {x0.shape!r}")
    n = x0.size
    if names is None:
        names = [f"x{i}" for i in range(n)]
    else:
        if isinstance(names, str):
            raise ProblemError(f"names must be a list of strings, got {names!r}")
        names = list(names)
        if len(names) != n:
            raise ProblemError(f"names has {len(names)} entries but start has {n}")
    pairs = _bound_pairs(bounds, n, names)
    parameters = [
        Parameter(name, float(x0[i]), lo, hi) for i, (name, (lo, hi)) in enumerate(zip(names, pairs))
    ]
    return space_from_parameters(parameters)


def _bound_pairs(bounds: object, n: int, names: Sequence[str]) -> list[tuple[float, float]]:
    if bounds is None:
        return [(-np.inf, np.inf)] * n
    try:
        rows = list(bounds)  # type: ignore[call-overload]
    except TypeError:
        raise ProblemError(f"bounds must be one (lower, upper) pair per parameter, got {bounds!r}") from None
    if len(rows) != n:
        raise ProblemError(f"bounds has {len(rows)} pairs but start has {n} parameters")
    pairs = []
    for name, row in zip(names, rows):
        try:
            lo, hi = row
        except (TypeError, ValueError):
            raise ProblemError(
                f"parameter {name!r}: bounds must be a (lower, upper) pair, got {row!r}"
            ) from None
        pairs.append((-np.inf if lo is None else lo, np.inf if hi is None else hi))
    return pairs
