"""The level of computational noise in an objective, from difference tables along a line.

Theory of operation.  The objective is evaluated at ``m + 1`` equally spaced points
``x + t_i p`` along a random unit direction ``p`` (in scaled coordinates, `directional.method.space`),
``t_i = (i - m/2) h``, centred on the point so that the point itself is one of them.  If
``f = smooth + noise`` with independent noise of standard deviation ``sigma``, the k-th forward
differences of the smooth part shrink like ``h**k`` while those of the noise keep the size
``sigma * sqrt((2k)! / (k!)**2)``.  So

    sigma_k = sqrt(gamma_k * mean((Delta^k f)**2)),   gamma_k = (k!)**2 / (2k)!,

estimates ``sigma`` once ``k`` is high enough for the smooth part to have died out.  Following
Moré and Wild (2011), the level is the first ``sigma_k`` whose k-th differences change sign and
which agrees within a factor 4 with ``sigma_{k+1}`` and ``sigma_{k+2}``.

Failure signals (``NoiseLevel.status``), each with its cure:

- ``"step too small"``: half or more of the first differences are exactly zero; the values do
  not resolve the noise (the step is multiplied by 100 and the table built again);
- ``"step too large"``: the values spread over more than 10 % of their size (the smooth part
  dominates; the step is divided by 100);
- ``"too few sign changes"``: no order of differences changes sign, or no order agrees with the
  next two (again the smooth part dominates; the step is divided by 100);
- ``"interrupted"``: the driver ended the estimate (budget, time, Ctrl-C).

A failed evaluation among the points makes the table useless: status ``"failed evaluation"``.

A line search's own points (`line_level`) are not equally spaced, but the same table can be
made of them: the k-th divided difference of ``k + 1`` neighbouring points, divided by the root
sum of squares of its weights, has the standard deviation ``sigma`` under noise whatever the
spacing (for equal spacing it is ``Delta^k f / sqrt(C(2k, k))``, the table above).  Only the
points nearest the lowest whose values agree to within ``LINE_SPREAD`` are used (the spread test
above, tighter), and the test is stricter than for a designed table, since the points were not
chosen for it: from some order on, every order changes sign and the levels agree within
``LINE_AGREEMENT``, and the differences of that order look like noise (`noise_like`).

References
----------
.. [1] J. J. Moré and S. M. Wild, "Estimating computational noise", *SIAM Journal on Scientific
   Computing* 33(3) (2011) 1292-1314.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Generator
from dataclasses import dataclass
from typing import TypeVar

import numpy as np

from directional.errors import ProblemError
from directional.method.space import Space
from directional.records import Batch, Halt, Purpose

# The search's settings (`directional.method.search.Settings`), which import this module: the
# functions that adjust them name their type by this variable, not by an import.
Settings = TypeVar("Settings")

DETECTED = "detected"
TOO_SMALL = "step too small"
TOO_LARGE = "step too large"
NO_SIGN_CHANGES = "too few sign changes"
FAILED = "failed evaluation"
INTERRUPTED = "interrupted"

AGREEMENT = 4.0  # sigma_k, sigma_{k+1}, sigma_{k+2} within this factor (Moré & Wild 2011)
SPREAD = 0.1  # values spreading more than this fraction of their size: step too large (ibid.)
GROWTH = 100.0  # factor by which the step changes after a failure (ibid.)
MAX_ORDER = 16  # differences of higher order only grow rounding (our choice; the paper uses m <= 8)
LINE_POINTS = 7  # a line's own table needs this many points within the spread (our choice)
LINE_SPREAD = 0.05  # a line's table uses the points whose values agree this closely (relative)
LINE_AGREEMENT = 3.5  # its levels from the first noisy order on agree within this factor
LINE_ORDERS = 8  # its highest order (each order from at least two differences)
AUDIBLE = 1e-10  # a line's level below this fraction of its values (at least 1) is rounding


@dataclass(frozen=True, slots=True, kw_only=True)
class NoiseLevel:
    """An estimate of the standard deviation of the noise in the objective near a point.

    ``level`` is in the objective's units (``nan`` when no level was detected); ``relative`` is
    ``level / |f(point)|`` (``nan`` when ``f(point)`` is zero or unknown); ``status`` is
    ``"detected"`` or one of the failure signals of `directional.method.noise`; ``order`` is the order of
    the differences the level came from (0 when none); ``step`` the spacing of the last table, in
    scaled coordinates; ``evaluations`` the objective calls spent (cache hits not counted).
    """

    level: float
    relative: float
    status: str
    order: int
    step: float
    evaluations: int
    direction: np.ndarray

    @property
    def detected(self) -> bool:
        """True when a level was found."""
        return self.status == DETECTED


def difference_table(
    values: np.ndarray, spread: float | None = SPREAD
) -> tuple[np.ndarray, np.ndarray, str]:
    """Noise levels ``sigma_k`` (k = 1..m) from values at equally spaced points, and the verdict.

    Returns ``(levels, sign_changes, status)`` where ``levels[k - 1]`` is ``sigma_k`` (orders
    up to 16 for long tables),
    ``sign_changes[k - 1]`` says whether the k-th differences change sign, and ``status`` is
    ``"detected"``, ``"step too small"``, ``"step too large"`` or ``"too few sign changes"``
    (Moré & Wild 2011, section 3 and their procedure ECnoise).  ``spread`` None leaves out the
    test for values that spread too far: near a minimum whose value is itself of the size of the
    noise the values spread by more than 10 % for no fault of the step, and the sign-change and
    agreement tests alone tell the smooth part from the noise.

    >>> levels, _, status = difference_table(np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0]))
    >>> status
    'step too large'

    Raises
    ------
    ValueError
        For fewer than 4 values or a value that is not finite.
    """
    values = np.asarray(values, dtype=float)
    if values.ndim != 1 or values.size < 4:
        raise ValueError(f"need at least 4 values, got {values.size}")
    if not np.all(np.isfinite(values)):
        raise ValueError("every value must be finite")
    m = values.size - 1
    orders = min(m, MAX_ORDER)
    levels = np.zeros(orders)
    changes = np.zeros(orders, dtype=bool)
    size = float(np.max(np.abs(values)))
    if spread is not None and size > 0.0 and (values.max() - values.min()) / size > spread:
        return levels, changes, TOO_LARGE
    # differences of values near overflow overflow when squared: work in units of a power of
    # two near their size (exact, so that the test for zero differences is unchanged)
    unit = math.ldexp(1.0, math.frexp(size)[1]) if size > 0.0 else 1.0
    table = values / unit
    gamma = 1.0
    for k in range(1, orders + 1):
        table = np.diff(table)
        if k == 1 and np.count_nonzero(table == 0.0) >= (m + 1) / 2:
            return levels, changes, TOO_SMALL
        gamma *= 0.5 * k / (2 * k - 1)  # (k!)^2 / (2k)!, built up one order at a time
        levels[k - 1] = unit * math.sqrt(gamma * float(np.mean(table**2)))
        changes[k - 1] = bool(table.min() * table.max() < 0.0)
    return levels, changes, _decide(levels, changes)


def _decide(levels: np.ndarray, changes: np.ndarray) -> str:
    return DETECTED if detected_level(levels, changes)[1] else NO_SIGN_CHANGES


def detected_level(levels: np.ndarray, changes: np.ndarray) -> tuple[float, int]:
    """The level and order chosen by the rule of Moré & Wild (2011), ``(nan, 0)`` if none."""
    for k in range(len(levels) - 2):
        window = levels[k : k + 3]
        if changes[k] and window.max() <= AGREEMENT * window.min():
            return float(levels[k]), k + 1
    return math.nan, 0


def line_level(points: dict[float, float]) -> float:
    """The noise level shown by a line search's own points ``{t: f(t)}``, nan when they look
    smooth (or too few agree in value).

    The generalized difference table of the module docstring, over the run of neighbouring
    points around the lowest whose values lie within ``LINE_SPREAD`` of their size.  Smooth
    values give levels that fall with the order; noise gives levels that stay level and
    differences that change sign at every order.  Measured on the smooth problems of the
    benchmarks (Moré, Garbow & Hillstrom 1981, the random quadratics): it stays silent there
    except along kinks, where refining a line further does not pay either.

    >>> rng = np.random.default_rng(1)
    >>> t = np.array([0.0, 0.1, 0.13, 0.2, 0.26, 0.3, 0.4, 0.45, 0.5])
    >>> noisy = dict(zip(t, 1.0 + (t - 0.3) ** 2 + 1e-3 * rng.standard_normal(t.size)))
    >>> bool(0.3e-3 < line_level(noisy) < 3e-3)
    True
    >>> math.isnan(line_level(dict(zip(t, 1.0 + (t - 0.3) ** 2))))
    True
    """
    t, f = _agreeing(points)
    if t.size < LINE_POINTS:
        return math.nan
    orders = min(t.size - 2, LINE_ORDERS)
    size = max(1.0, float(np.max(np.abs(f))))
    f = f - f.min()  # the differences annihilate constants: work with the smaller numbers
    # The orders that qualify are those from some k on (a tail that qualifies stays so without
    # its first order): grow the tail down from the highest order while it does, which rejects
    # most smooth lines after one or two orders.
    found, low, high = None, math.inf, 0.0
    for k in range(orders, 0, -1):
        z = _divided(t, f, k)
        level = math.sqrt(float(np.mean(z**2)))
        low, high = min(low, level), max(high, level)
        if not (z.min() * z.max() < 0.0 and high <= LINE_AGREEMENT * low):
            break
        found = (z, level) if orders - k >= 2 else None
    if found is None:
        return math.nan
    z, level = found
    return level if noise_like(z) and level > AUDIBLE * size else math.nan


def _agreeing(points: dict[float, float]) -> tuple[np.ndarray, np.ndarray]:
    """The run of neighbouring points (sorted by t) around the lowest finite value whose values
    lie within ``LINE_SPREAD`` of the largest of them in size, grown one neighbour at a time
    towards the one nearer the lowest value."""
    items = sorted((t, f) for t, f in points.items() if math.isfinite(f))
    f = [v for _, v in items]
    if len(f) < LINE_POINTS:
        return np.empty(0), np.empty(0)
    lowest = lo = hi = min(range(len(f)), key=f.__getitem__)
    bottom, top = f[lowest], f[lowest]
    while True:
        grow = []
        for j in (lo - 1, hi + 1):
            if 0 <= j < len(f):
                a, b = min(bottom, f[j]), max(top, f[j])
                if b - a <= LINE_SPREAD * max(abs(a), abs(b)):
                    grow.append((f[j] - f[lowest], j))
        if not grow:
            break
        j = min(grow)[1]
        lo, hi = min(lo, j), max(hi, j)
        bottom, top = min(bottom, f[j]), max(top, f[j])
    run = items[lo : hi + 1]
    return np.array([t for t, _ in run]), np.array([v for _, v in run])


def _divided(t: np.ndarray, f: np.ndarray, k: int) -> np.ndarray:
    """The k-th divided differences of neighbouring points, each divided by the root sum of
    squares of its weights ``1 / prod_{l != i} (t_i - t_l)``: of standard deviation sigma under
    noise of standard deviation sigma (in units of the values, whatever the spacing)."""
    windows = np.lib.stride_tricks.sliding_window_view(t, k + 1)  # (count, k + 1)
    gaps = windows[:, :, None] - windows[:, None, :]
    gaps[:, np.arange(k + 1), np.arange(k + 1)] = 1.0
    products = np.prod(gaps, axis=2)
    weights = np.min(np.abs(products), axis=1, keepdims=True) / products  # largest has size 1
    values = np.lib.stride_tricks.sliding_window_view(f, k + 1)
    return np.einsum("ij,ij->i", weights, values) / np.linalg.norm(weights, axis=1)


def noise_like(differences: np.ndarray) -> bool:
    """True when differences of a table look like noise's: they change sign at least twice (a
    V-shaped kink changes the sign of its first differences once, noise about two times in
    three), and at least half of them exceed a quarter of their root mean square (of Gaussian
    noise's about 80 % do; a jump or kink puts its weight on one or two).  Common practice, no
    source."""
    if np.count_nonzero(differences[:-1] * differences[1:] < 0.0) < 2:
        return False
    size = np.abs(differences)
    top = float(np.max(size))
    if not (0.0 < top < math.inf):
        return False
    relative = size / top  # in units of the largest: no overflow when squared
    spread = math.sqrt(float(np.mean(relative**2)))
    return bool(np.count_nonzero(relative > 0.25 * spread) >= 0.5 * len(relative))


def random_direction(n: int, rng: np.random.Generator) -> np.ndarray:
    """A direction drawn uniformly from the unit sphere in n dimensions (normalized Gaussian)."""
    while True:
        p = rng.standard_normal(n)
        norm = float(np.linalg.norm(p))
        if norm > 0.0:
            return p / norm


def offsets(points: int, step: float, lo: float, hi: float) -> np.ndarray:
    """Line parameters ``t_i = (i - m/2) h``, shifted to fit inside ``[lo, hi]`` if they must be.

    Raises
    ------
    ProblemError
        When the feasible segment is shorter than ``m h``.
    """
    m = points - 1
    t = (np.arange(points) - m // 2) * step
    if hi - lo < m * step:
        raise ProblemError(
            f"the bounds leave a segment of {hi - lo:.3g} along the direction, need {m * step:.3g}: "
            "use a smaller step"
        )
    if t[-1] > hi:
        t = t - (t[-1] - hi)
    if t[0] < lo:
        t = t + (lo - t[0])
    return t


def estimate(
    space: Space,
    u: np.ndarray,
    *,
    step: float = 1e-6,
    points: int = 9,
    seed: int | np.random.Generator | None = 0,
    retries: int = 2,
    spread: float | None = SPREAD,
) -> Generator[Batch, np.ndarray, NoiseLevel]:
    """The noise estimate at scaled point ``u``, as a generator for the driver (purpose "noise").

    Tries the step ``step``, then, after a failure signal that a different step would cure, up to
    ``retries`` more steps (times or divided by 100).  The direction is drawn once from ``seed``.
    ``spread`` is passed to `difference_table`.
    """
    rng = seed if isinstance(seed, np.random.Generator) else np.random.default_rng(seed)
    direction = random_direction(space.size, rng)
    lo, hi = space.segment(u, direction)
    h = float(step)
    spent = 0
    result = NoiseLevel(
        level=math.nan, relative=math.nan, status=INTERRUPTED, order=0, step=h, evaluations=0,
        direction=direction,
    )
    for _ in range(retries + 1):
        t = offsets(points, h, lo, hi)
        try:
            values = yield Batch(points=space.to_user(u + t[:, None] * direction), purpose=Purpose.NOISE)
        except Halt:
            return result
        spent += len(t)
        result = _from_values(values, t, h, spent, direction, spread)
        if result.status == TOO_SMALL:
            h *= GROWTH
        elif result.status in (TOO_LARGE, NO_SIGN_CHANGES):
            h /= GROWTH
        else:
            break
    return result


def _from_values(
    values: np.ndarray,
    t: np.ndarray,
    h: float,
    spent: int,
    direction: np.ndarray,
    spread: float | None = SPREAD,
) -> NoiseLevel:
    def record(level: float, status: str, order: int, centre: float = math.nan) -> NoiseLevel:
        relative = level / abs(centre) if math.isfinite(centre) and centre != 0.0 else math.nan
        return NoiseLevel(
            level=level, relative=relative, status=status, order=order, step=h,
            evaluations=spent, direction=direction,
        )

    if not np.all(np.isfinite(values)):
        return record(math.nan, FAILED, 0)
    levels, changes, status = difference_table(values, spread)
    centre = float(values[int(np.argmin(np.abs(t)))])
    if status != DETECTED:
        return record(math.nan, status, 0, centre)
    level, order = detected_level(levels, changes)
    return record(level, DETECTED, order, centre)


def check_options(step: object, points: object, retries: object) -> None:
    if isinstance(step, bool) or not isinstance(step, int | float) or not 0.0 < step < 1.0:
        raise ProblemError(f"step must be a number in (0, 1), got {step!r}")
    if isinstance(points, bool) or not isinstance(points, int) or points < 5:
        raise ProblemError(f"points must be a whole number of at least 5, got {points!r}")
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise ProblemError(f"retries must be a whole number of at least 0, got {retries!r}")


def noise_option(noise: object) -> float | str | None:
    """Validate the ``noise`` argument of the public entry points.

    None (not stated: the search notices noise when its values scatter and estimates it then,
    `directional.method.search`), "none" (rounding only, nothing noticed), a non-negative number
    (the absolute noise level, in the objective's units), or "estimate" (estimate it at the
    start before the search).

    Raises
    ------
    ProblemError
        For anything else.
    """
    if noise is None or noise == "estimate" or noise == "none":
        return noise  # type: ignore[return-value]
    if isinstance(noise, bool) or not isinstance(noise, int | float | np.floating):
        raise ProblemError(f"noise must be None, a number, 'estimate' or 'none', got {noise!r}")
    if not (math.isfinite(noise) and noise >= 0.0):
        raise ProblemError(f"noise must be a finite number >= 0, got {noise!r}")
    return float(noise)


def noise_level(
    space: Space, noise: float | str | None
) -> Generator[Batch, np.ndarray, tuple[float | None, tuple[str, ...]]]:
    """The noise level to plan with, and a note for the user when it was estimated.

    A generator for the driver: ``"estimate"`` runs `estimate` at the start (counted,
    journaled); when no level is detected the note says why and the level stays None (rounding
    only).  Any other option is returned as it is, with nothing evaluated.
    """
    if noise != "estimate":
        return (None if noise == "none" else noise), ()  # type: ignore[return-value]
    found: NoiseLevel = yield from estimate(space, np.zeros(space.size))
    if found.detected:
        return found.level, (
            f"noise level {found.level:.3g} (relative {found.relative:.2g}) from a difference table "
            f"of order {found.order} at the start; {found.evaluations} evaluations",
        )
    return None, (f"noise level not detected at the start ({found.status}); rounding assumed",)


def planned(settings: Settings, option: float | str | None, level: float | None) -> Settings:
    """The settings a search runs with, given the ``noise`` option and the level found for it.

    A level (stated, or estimated at the start) floors the value tolerance (`floored`) and is
    the one the search works above; with no level the search watches for noise itself, unless
    the option is "none" (rounding only).
    """
    if level is not None:
        return dataclasses.replace(floored(settings, level), noise=float(level), notice=False)
    return dataclasses.replace(settings, noise=0.0, notice=option != "none")


def noticed(level: float) -> str:
    """The note for the user when the search noticed noise nobody stated."""
    return (
        f"noise level {level:.3g} noticed by the search (a difference table at its best point, "
        "Moré & Wild 2011): it then worked above it, and returned the point its regression "
        "model puts lowest"
    )


def floored(settings: Settings, level: float | None) -> Settings:
    """Settings whose value tolerance is never below the noise level.

    The search's test is ``drop <= value_tolerance * max(1, |f|)``; a value tolerance of at least
    ``level`` keeps that threshold at or above the noise however small ``|f|`` becomes.
    """
    if level is None or level <= settings.value_tolerance:
        return settings
    return dataclasses.replace(settings, value_tolerance=float(level))
