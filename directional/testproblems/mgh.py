"""The 35 unconstrained test problems of Moré, Garbow and Hillstrom (1981).

Each problem is a sum of squares ``f(x) = sum_i r_i(x)**2`` (no factor 1/2, as in the paper) of
``m`` residuals in ``n`` variables, with the paper's standard starting point and, where the paper
reports one, its minimum value and minimizer.  The residual functions are written here from the
published definitions; the data tables of the fitting problems (Bard, Gaussian, Meyer,
Kowalik–Osborne, Osborne 1 and 2, Beale) are copied into this module, so nothing is read from disk.

Example
-------
>>> rosenbrock = problem(1)
>>> round(rosenbrock(rosenbrock.start), 12)
24.2
>>> rosenbrock(rosenbrock.xmin)
0.0

Conventions decided here
------------------------
- Variable-size problems take ``n`` (and for problems 6, 11, 12, 16, 18, 32–35 also ``m``); the
  default is the dimension the authors' sample data use (Algorithm 566), see `problem`.
- ``fmin`` is the value the paper reports for this (n, m), copied as printed (the paper truncates
  most non-zero values to six digits, so the true minimum lies slightly above), or computed from the
  paper's closed formula (problems 32–34); ``None`` where the paper gives no value for this size.
- ``xmin`` is the paper's minimizer where it prints one or states a rule.  Problems 3 and 6 are
  printed with truncated digits (``1.098...e-5, 9.106...`` and ``0.2578...``); we store the exact
  zero (problem 3) and the exact stationary point (problem 6), computed by us to full precision,
  whose leading digits are the printed ones.  For problem 26 the paper states only ``f = 0``;
  ``x = 0`` is evidently a zero of every residual and is given.  For problems 33 and 34, where every
  point of a hyperplane is a minimizer, the one nearest the standard start is given.
- Residuals are evaluated with floating-point warnings silenced: overflow or a division by zero
  gives ``inf`` or ``nan`` in the result, which the caller (the driver) must treat as a failure.

References
----------
.. [1] J. J. Moré, B. S. Garbow and K. E. Hillstrom, "Testing Unconstrained Optimization
   Software", ACM Transactions on Mathematical Software 7(1):17–41, 1981. doi:10.1145/355934.355936
.. [2] J. J. Moré, B. S. Garbow and K. E. Hillstrom, "Algorithm 566: FORTRAN Subroutines for
   Testing Unconstrained Optimization Software", ACM TOMS 7(1):136–140, 1981 (sample dimensions,
   the helical-valley convention at x1 = 0, and m = 99 for the Gulf problem).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from directional.errors import ProblemError

__all__ = ["TestProblem", "catalogue", "problem"]

ResidualRule = Callable[[np.ndarray, int, int], np.ndarray]


@dataclass(frozen=True, slots=True, kw_only=True)
class TestProblem:
    """One instance (fixed n and m) of a Moré–Garbow–Hillstrom test problem.

    Built by `problem` or `catalogue`; the arrays are read-only.  Two instances compare equal when
    their number, name, n, m and fmin agree.

    Attributes
    ----------
    number : int
        The problem's number in the paper, 1 to 35.
    name : str
        The paper's name for it.
    n, m : int
        Number of variables and of residuals.
    start : numpy.ndarray
        The paper's standard starting point for this n.
    fmin : float or None
        The reported minimum value for this (n, m), or None where the paper gives none.
    xmin : numpy.ndarray or None
        A minimizer (see the module notes on how it was obtained), or None.
    """

    __test__ = False  # keeps pytest from collecting this class as a test case

    number: int
    name: str
    n: int
    m: int
    start: np.ndarray = field(compare=False)
    fmin: float | None
    xmin: np.ndarray | None = field(compare=False)
    rule: ResidualRule = field(repr=False, compare=False)

    def __post_init__(self) -> None:
        for label in ("start", "xmin"):
            value = getattr(self, label)
            if value is None:
                continue
            array = np.array(value, dtype=float)
            if array.shape != (self.n,):
                raise ProblemError(f"{label} must have shape ({self.n},), got {array.shape!r}")
            array.setflags(write=False)
            object.__setattr__(self, label, array)

    def residuals(self, x: np.ndarray) -> np.ndarray:
        """Return the residual vector r(x), shape (m,).

        Raises
        ------
        ProblemError
            If `x` does not have shape (n,).
        """
        point = self._point(x)
        with np.errstate(all="ignore"):
            return np.asarray(self.rule(point, self.n, self.m), dtype=float)

    def __call__(self, x: np.ndarray) -> float:
        """Return f(x), the sum of the squared residuals (no factor 1/2)."""
        r = self.residuals(x)
        with np.errstate(over="ignore", invalid="ignore"):
            return float(np.dot(r, r))

    def scaled_start(self, factor: float) -> np.ndarray:
        """Return ``factor * start``: the paper's farther starts use factors 10 and 100.

        Raises
        ------
        ProblemError
            If `factor` is not a finite number.
        """
        if not isinstance(factor, int | float | np.number) or not math.isfinite(factor):
            raise ProblemError(f"factor must be a finite number, got {factor!r}")
        return float(factor) * self.start

    def _point(self, x: np.ndarray) -> np.ndarray:
        try:
            point = np.asarray(x, dtype=float)
        except (TypeError, ValueError):
            raise ProblemError(f"x must be an array of {self.n} numbers, got {x!r}") from None
        if point.shape != (self.n,):
            raise ProblemError(f"x must have shape ({self.n},), got {point.shape!r}")
        return point


# --------------------------------------------------------------------------------------------
# Data tables, copied from the paper's problem definitions [1].

_BEALE_Y = np.array([1.5, 2.25, 2.625])

_BARD_Y = np.array(
    [0.14, 0.18, 0.22, 0.25, 0.29, 0.32, 0.35, 0.39, 0.37, 0.58, 0.73, 0.96, 1.34, 2.10, 4.39]
)

_GAUSSIAN_Y = np.array(
    [
        0.0009, 0.0044, 0.0175, 0.0540, 0.1295, 0.2420, 0.3521, 0.3989,
        0.3521, 0.2420, 0.1295, 0.0540, 0.0175, 0.0044, 0.0009,
    ]
)  # fmt: skip

_MEYER_Y = np.array(
    [
        34780.0, 28610.0, 23650.0, 19630.0, 16370.0, 13720.0, 11540.0, 9744.0,
        8261.0, 7030.0, 6005.0, 5147.0, 4427.0, 3820.0, 3307.0, 2872.0,
    ]
)  # fmt: skip

_KOWALIK_Y = np.array(
    [0.1957, 0.1947, 0.1735, 0.1600, 0.0844, 0.0627, 0.0456, 0.0342, 0.0323, 0.0235, 0.0246]
)
_KOWALIK_U = np.array(
    [4.0, 2.0, 1.0, 0.5, 0.25, 0.167, 0.125, 0.1, 0.0833, 0.0714, 0.0625]
)

_OSBORNE1_Y = np.array(
    [
        0.844, 0.908, 0.932, 0.936, 0.925, 0.908, 0.881, 0.850, 0.818, 0.784, 0.751,
        0.718, 0.685, 0.658, 0.628, 0.603, 0.580, 0.558, 0.538, 0.522, 0.506, 0.490,
        0.478, 0.467, 0.457, 0.448, 0.438, 0.431, 0.424, 0.420, 0.414, 0.411, 0.406,
    ]
)  # fmt: skip

_OSBORNE2_Y = np.array(
    [
        1.366, 1.191, 1.112, 1.013, 0.991, 0.885, 0.831, 0.847, 0.786, 0.725, 0.746,
        0.679, 0.608, 0.655, 0.616, 0.606, 0.602, 0.626, 0.651, 0.724, 0.649, 0.649,
        0.694, 0.644, 0.624, 0.661, 0.612, 0.558, 0.533, 0.495, 0.500, 0.423, 0.395,
        0.375, 0.372, 0.391, 0.396, 0.405, 0.428, 0.429, 0.523, 0.562, 0.607, 0.653,
        0.672, 0.708, 0.633, 0.668, 0.645, 0.632, 0.591, 0.559, 0.597, 0.625, 0.739,
        0.710, 0.729, 0.720, 0.636, 0.581, 0.428, 0.292, 0.162, 0.098, 0.054,
    ]
)  # fmt: skip

for _table in (
    _BEALE_Y, _BARD_Y, _GAUSSIAN_Y, _MEYER_Y, _KOWALIK_Y, _KOWALIK_U, _OSBORNE1_Y, _OSBORNE2_Y
):
    _table.setflags(write=False)
del _table


# --------------------------------------------------------------------------------------------
# Residual functions r(x, n, m), one per problem, numbered as in the paper [1].


def _rosenbrock(x: np.ndarray, n: int, m: int) -> np.ndarray:
    return np.array([10.0 * (x[1] - x[0] ** 2), 1.0 - x[0]])


def _freudenstein_roth(x: np.ndarray, n: int, m: int) -> np.ndarray:
    x1, x2 = x
    return np.array(
        [
            -13.0 + x1 + ((5.0 - x2) * x2 - 2.0) * x2,
            -29.0 + x1 + ((x2 + 1.0) * x2 - 14.0) * x2,
        ]
    )


def _powell_badly_scaled(x: np.ndarray, n: int, m: int) -> np.ndarray:
    x1, x2 = x
    return np.array([1e4 * x1 * x2 - 1.0, np.exp(-x1) + np.exp(-x2) - 1.0001])


def _brown_badly_scaled(x: np.ndarray, n: int, m: int) -> np.ndarray:
    x1, x2 = x
    return np.array([x1 - 1e6, x2 - 2e-6, x1 * x2 - 2.0])


def _beale(x: np.ndarray, n: int, m: int) -> np.ndarray:
    i = np.arange(1, 4)
    return _BEALE_Y - x[0] * (1.0 - x[1] ** i)


def _jennrich_sampson(x: np.ndarray, n: int, m: int) -> np.ndarray:
    i = np.arange(1, m + 1)
    return 2.0 + 2.0 * i - (np.exp(i * x[0]) + np.exp(i * x[1]))


def _helical_valley(x: np.ndarray, n: int, m: int) -> np.ndarray:
    x1, x2, x3 = x
    if x1 > 0.0:
        theta = math.atan(x2 / x1) / (2.0 * math.pi)
    elif x1 < 0.0:
        theta = math.atan(x2 / x1) / (2.0 * math.pi) + 0.5
    else:  # the paper leaves x1 = 0 open; Algorithm 566 [2] uses 0.25 * sign(x2)
        theta = 0.25 if x2 >= 0.0 else -0.25  # Fortran SIGN(0.25, x2)
    return np.array([10.0 * (x3 - 10.0 * theta), 10.0 * (math.hypot(x1, x2) - 1.0), x3])


def _bard(x: np.ndarray, n: int, m: int) -> np.ndarray:
    u = np.arange(1.0, 16.0)
    v = 16.0 - u
    w = np.minimum(u, v)
    return _BARD_Y - (x[0] + u / (v * x[1] + w * x[2]))


def _gaussian(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = (8.0 - np.arange(1, 16)) / 2.0
    return x[0] * np.exp(-x[1] * (t - x[2]) ** 2 / 2.0) - _GAUSSIAN_Y


def _meyer(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = 45.0 + 5.0 * np.arange(1, 17)
    return x[0] * np.exp(x[1] / (t + x[2])) - _MEYER_Y


def _gulf(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = np.arange(1, m + 1) / 100.0
    y = 25.0 + (-50.0 * np.log(t)) ** (2.0 / 3.0)
    return np.exp(-np.abs(y - x[1]) ** x[2] / x[0]) - t


def _box(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = 0.1 * np.arange(1, m + 1)
    return (
        np.exp(-t * x[0]) - np.exp(-t * x[1]) - x[2] * (np.exp(-t) - np.exp(-10.0 * t))
    )


def _powell_singular_block(x: np.ndarray) -> np.ndarray:
    """Residuals of Powell's singular function for x of shape (4, k), stacked as (4, k)."""
    return np.stack(
        [
            x[0] + 10.0 * x[1],
            math.sqrt(5.0) * (x[2] - x[3]),
            (x[1] - 2.0 * x[2]) ** 2,
            math.sqrt(10.0) * (x[0] - x[3]) ** 2,
        ]
    )


def _powell_singular(x: np.ndarray, n: int, m: int) -> np.ndarray:
    return _powell_singular_block(x.reshape(4, 1)).ravel()


def _wood(x: np.ndarray, n: int, m: int) -> np.ndarray:
    x1, x2, x3, x4 = x
    return np.array(
        [
            10.0 * (x2 - x1**2),
            1.0 - x1,
            math.sqrt(90.0) * (x4 - x3**2),
            1.0 - x3,
            math.sqrt(10.0) * (x2 + x4 - 2.0),
            (x2 - x4) / math.sqrt(10.0),
        ]
    )


def _kowalik_osborne(x: np.ndarray, n: int, m: int) -> np.ndarray:
    u = _KOWALIK_U
    return _KOWALIK_Y - x[0] * (u**2 + u * x[1]) / (u**2 + u * x[2] + x[3])


def _brown_dennis(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = np.arange(1, m + 1) / 5.0
    return (x[0] + t * x[1] - np.exp(t)) ** 2 + (x[2] + x[3] * np.sin(t) - np.cos(t)) ** 2


def _osborne1(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = 10.0 * np.arange(33)
    return _OSBORNE1_Y - (x[0] + x[1] * np.exp(-t * x[3]) + x[2] * np.exp(-t * x[4]))


def _biggs_exp6(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = 0.1 * np.arange(1, m + 1)
    y = np.exp(-t) - 5.0 * np.exp(-10.0 * t) + 3.0 * np.exp(-4.0 * t)
    return x[2] * np.exp(-t * x[0]) - x[3] * np.exp(-t * x[1]) + x[5] * np.exp(-t * x[4]) - y


def _osborne2(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = np.arange(65) / 10.0
    model = (
        x[0] * np.exp(-t * x[4])
        + x[1] * np.exp(-((t - x[8]) ** 2) * x[5])
        + x[2] * np.exp(-((t - x[9]) ** 2) * x[6])
        + x[3] * np.exp(-((t - x[10]) ** 2) * x[7])
    )
    return _OSBORNE2_Y - model


def _watson(x: np.ndarray, n: int, m: int) -> np.ndarray:
    t = np.arange(1, 30) / 29.0
    powers = t[:, None] ** np.arange(n)  # powers[i, k] = t_i**k
    slope = powers[:, : n - 1] @ (np.arange(1, n) * x[1:])
    value = powers @ x
    return np.concatenate([slope - value**2 - 1.0, [x[0], x[1] - x[0] ** 2 - 1.0]])


def _extended_rosenbrock(x: np.ndarray, n: int, m: int) -> np.ndarray:
    odd, even = x[0::2], x[1::2]
    return np.column_stack([10.0 * (even - odd**2), 1.0 - odd]).ravel()


def _extended_powell(x: np.ndarray, n: int, m: int) -> np.ndarray:
    return _powell_singular_block(x.reshape(-1, 4).T).T.ravel()


_PENALTY_A = 1e-5


def _penalty1(x: np.ndarray, n: int, m: int) -> np.ndarray:
    return np.append(math.sqrt(_PENALTY_A) * (x - 1.0), np.dot(x, x) - 0.25)


def _penalty2(x: np.ndarray, n: int, m: int) -> np.ndarray:
    root_a = math.sqrt(_PENALTY_A)
    i = np.arange(2, n + 1)
    y = np.exp(i / 10.0) + np.exp((i - 1) / 10.0)
    e = np.exp(x / 10.0)
    weights = np.arange(n, 0, -1)  # n - j + 1 for j = 1..n
    return np.concatenate(
        [
            [x[0] - 0.2],
            root_a * (e[1:] + e[:-1] - y),
            root_a * (e[1:] - math.exp(-0.1)),
            [np.dot(weights, x**2) - 1.0],
        ]
    )


def _variably_dimensioned(x: np.ndarray, n: int, m: int) -> np.ndarray:
    s = np.dot(np.arange(1, n + 1), x - 1.0)
    return np.concatenate([x - 1.0, [s, s**2]])


def _trigonometric(x: np.ndarray, n: int, m: int) -> np.ndarray:
    i = np.arange(1, n + 1)
    return n - np.sum(np.cos(x)) + i * (1.0 - np.cos(x)) - np.sin(x)


def _brown_almost_linear(x: np.ndarray, n: int, m: int) -> np.ndarray:
    linear = x[:-1] + np.sum(x) - (n + 1)
    return np.append(linear, np.prod(x) - 1.0)


def _grid(n: int) -> tuple[float, np.ndarray]:
    h = 1.0 / (n + 1)
    return h, h * np.arange(1, n + 1)


def _discrete_boundary_value(x: np.ndarray, n: int, m: int) -> np.ndarray:
    h, t = _grid(n)
    padded = np.concatenate([[0.0], x, [0.0]])  # x_0 = x_(n+1) = 0
    return 2.0 * x - padded[:-2] - padded[2:] + h**2 * (x + t + 1.0) ** 3 / 2.0


def _discrete_integral_equation(x: np.ndarray, n: int, m: int) -> np.ndarray:
    h, t = _grid(n)
    g = (x + t + 1.0) ** 3
    lower = np.cumsum(t * g)  # sum over j <= i of t_j g_j
    upper_all = np.cumsum(((1.0 - t) * g)[::-1])[::-1]  # sum over j >= i of (1 - t_j) g_j
    upper = np.append(upper_all[1:], 0.0)  # sum over j > i
    return x + h * ((1.0 - t) * lower + t * upper) / 2.0


def _broyden_tridiagonal(x: np.ndarray, n: int, m: int) -> np.ndarray:
    padded = np.concatenate([[0.0], x, [0.0]])
    return (3.0 - 2.0 * x) * x - padded[:-2] - 2.0 * padded[2:] + 1.0


def _broyden_banded(x: np.ndarray, n: int, m: int) -> np.ndarray:
    lower_width, upper_width = 5, 1
    g = x * (1.0 + x)
    cumulative = np.concatenate([[0.0], np.cumsum(g)])  # cumulative[k] = g_1 + ... + g_k
    i = np.arange(1, n + 1)
    low = np.maximum(1, i - lower_width)
    high = np.minimum(n, i + upper_width)
    band = cumulative[high] - cumulative[low - 1] - g  # sum over the band without j = i
    return x * (2.0 + 5.0 * x**2) + 1.0 - band


def _linear_full_rank(x: np.ndarray, n: int, m: int) -> np.ndarray:
    r = np.full(m, -2.0 * np.sum(x) / m - 1.0)
    r[:n] += x
    return r


def _linear_rank1(x: np.ndarray, n: int, m: int) -> np.ndarray:
    return np.arange(1, m + 1) * np.dot(np.arange(1, n + 1), x) - 1.0


def _linear_rank1_zero(x: np.ndarray, n: int, m: int) -> np.ndarray:
    s = np.dot(np.arange(2, n), x[1 : n - 1])
    r = np.arange(1, m - 1) * s - 1.0  # r_i = (i - 1) s - 1 for i = 2..m-1
    return np.concatenate([[-1.0], r, [-1.0]])


def _chebyquad(x: np.ndarray, n: int, m: int) -> np.ndarray:
    y = 2.0 * x - 1.0  # shifted Chebyshev polynomials on [0, 1]: T_k(2x - 1)
    means = np.empty(m)
    previous, current = np.ones(n), y
    for k in range(1, m + 1):
        means[k - 1] = np.mean(current)
        previous, current = current, 2.0 * y * current - previous
    k = np.arange(1, m + 1)
    with np.errstate(divide="ignore"):
        integrals = np.where(k % 2 == 0, -1.0 / (k**2 - 1.0), 0.0)
    return means - integrals


# --------------------------------------------------------------------------------------------
# The table of problems.


@dataclass(frozen=True, slots=True, kw_only=True)
class _Entry:
    """How to build instances of one problem: sizes, start, reported values."""

    name: str
    rule: ResidualRule
    start: Callable[[int], np.ndarray]
    n: int | None = None  # fixed dimension, or None for a variable-size problem
    default_n: int = 0
    n_valid: Callable[[int], bool] = lambda n: n >= 1
    n_text: str = "n >= 1"
    m: Callable[[int], int] | None = None  # m as a function of n when m is not free
    default_m: Callable[[int], int] | None = None  # default m when m is free
    m_valid: Callable[[int, int], bool] | None = None
    m_text: str = ""
    fmin: Callable[[int, int], float | None] = lambda n, m: None
    xmin: Callable[[int, int], np.ndarray | None] = lambda n, m: None


def _fixed(values: list[float]) -> Callable[[int], np.ndarray]:
    return lambda n: np.array(values, dtype=float)


def _value(value: float, **only: int) -> Callable[[int, int], float | None]:
    """A reported value that holds for every size, or only for the sizes given by keyword."""

    def reported(n: int, m: int) -> float | None:
        if only.get("m", m) != m or only.get("n", n) != n:
            return None
        return value

    return reported


def _point(values: list[float], **only: int) -> Callable[[int, int], np.ndarray | None]:
    def reported(n: int, m: int) -> np.ndarray | None:
        if only.get("m", m) != m:
            return None
        return np.array(values, dtype=float)

    return reported


def _table(values: dict[int, float]) -> Callable[[int, int], float | None]:
    return lambda n, m: values.get(n)


def _rank1_minimizer(weights: np.ndarray, target: float) -> np.ndarray:
    """Point of {x : weights . x = target} nearest the standard start x = 1 (problems 33, 34)."""
    ones = np.ones(weights.size)
    return ones - (weights @ ones - target) / (weights @ weights) * weights


# Problem 3: exact zero of both residuals; the paper prints (1.098...e-5, 9.106...).
# Problem 6: exact stationary point x1 = x2 for m = 10; the paper prints 0.2578... and 124.362...
# Both were solved by us in 40-digit arithmetic (mpmath) from the definitions above.
_POWELL_BADLY_SCALED_ZERO = [1.0981593296998175e-05, 9.106146739866524]
_JENNRICH_SAMPSON_POINT = 0.25782521367036408

_ENTRIES: dict[int, _Entry] = {
    1: _Entry(
        name="Rosenbrock", rule=_rosenbrock, n=2, m=lambda n: 2,
        start=_fixed([-1.2, 1.0]), fmin=_value(0.0), xmin=_point([1.0, 1.0]),
    ),
    2: _Entry(
        name="Freudenstein and Roth", rule=_freudenstein_roth, n=2, m=lambda n: 2,
        start=_fixed([0.5, -2.0]), fmin=_value(0.0), xmin=_point([5.0, 4.0]),
    ),
    3: _Entry(
        name="Powell badly scaled", rule=_powell_badly_scaled, n=2, m=lambda n: 2,
        start=_fixed([0.0, 1.0]), fmin=_value(0.0), xmin=_point(_POWELL_BADLY_SCALED_ZERO),
    ),
    4: _Entry(
        name="Brown badly scaled", rule=_brown_badly_scaled, n=2, m=lambda n: 3,
        start=_fixed([1.0, 1.0]), fmin=_value(0.0), xmin=_point([1e6, 2e-6]),
    ),
    5: _Entry(
        name="Beale", rule=_beale, n=2, m=lambda n: 3,
        start=_fixed([1.0, 1.0]), fmin=_value(0.0), xmin=_point([3.0, 0.5]),
    ),
    6: _Entry(
        name="Jennrich and Sampson", rule=_jennrich_sampson, n=2,
        default_m=lambda n: 10, m_valid=lambda n, m: m >= n, m_text="m >= 2",
        start=_fixed([0.3, 0.4]), fmin=_value(124.362, m=10),
        xmin=_point([_JENNRICH_SAMPSON_POINT] * 2, m=10),
    ),
    7: _Entry(
        name="Helical valley", rule=_helical_valley, n=3, m=lambda n: 3,
        start=_fixed([-1.0, 0.0, 0.0]), fmin=_value(0.0), xmin=_point([1.0, 0.0, 0.0]),
    ),
    8: _Entry(
        name="Bard", rule=_bard, n=3, m=lambda n: 15,
        start=_fixed([1.0, 1.0, 1.0]), fmin=_value(8.21487e-3),
    ),
    9: _Entry(
        name="Gaussian", rule=_gaussian, n=3, m=lambda n: 15,
        start=_fixed([0.4, 1.0, 0.0]), fmin=_value(1.12793e-8),
    ),
    10: _Entry(
        name="Meyer", rule=_meyer, n=3, m=lambda n: 16,
        start=_fixed([0.02, 4000.0, 250.0]), fmin=_value(87.9458),
    ),
    11: _Entry(
        name="Gulf research and development", rule=_gulf, n=3,
        default_m=lambda n: 99, m_valid=lambda n, m: n <= m <= 100, m_text="3 <= m <= 100",
        start=_fixed([5.0, 2.5, 0.15]), fmin=_value(0.0), xmin=_point([50.0, 25.0, 1.5]),
    ),
    12: _Entry(
        name="Box three-dimensional", rule=_box, n=3,
        default_m=lambda n: 10, m_valid=lambda n, m: m >= n, m_text="m >= 3",
        start=_fixed([0.0, 10.0, 20.0]), fmin=_value(0.0), xmin=_point([1.0, 10.0, 1.0]),
    ),
    13: _Entry(
        name="Powell singular", rule=_powell_singular, n=4, m=lambda n: 4,
        start=_fixed([3.0, -1.0, 0.0, 1.0]), fmin=_value(0.0), xmin=_point([0.0] * 4),
    ),
    14: _Entry(
        name="Wood", rule=_wood, n=4, m=lambda n: 6,
        start=_fixed([-3.0, -1.0, -3.0, -1.0]), fmin=_value(0.0), xmin=_point([1.0] * 4),
    ),
    15: _Entry(
        name="Kowalik and Osborne", rule=_kowalik_osborne, n=4, m=lambda n: 11,
        start=_fixed([0.25, 0.39, 0.415, 0.39]), fmin=_value(3.07505e-4),
    ),
    16: _Entry(
        name="Brown and Dennis", rule=_brown_dennis, n=4,
        default_m=lambda n: 20, m_valid=lambda n, m: m >= n, m_text="m >= 4",
        start=_fixed([25.0, 5.0, -5.0, -1.0]), fmin=_value(85822.2, m=20),
    ),
    17: _Entry(
        name="Osborne 1", rule=_osborne1, n=5, m=lambda n: 33,
        start=_fixed([0.5, 1.5, -1.0, 0.01, 0.02]), fmin=_value(5.46489e-5),
    ),
    18: _Entry(
        name="Biggs EXP6", rule=_biggs_exp6, n=6,
        default_m=lambda n: 13, m_valid=lambda n, m: m >= n, m_text="m >= 6",
        start=_fixed([1.0, 2.0, 1.0, 1.0, 1.0, 1.0]), fmin=_value(0.0),
        xmin=_point([1.0, 10.0, 1.0, 5.0, 4.0, 3.0]),
    ),
    19: _Entry(
        name="Osborne 2", rule=_osborne2, n=11, m=lambda n: 65,
        start=_fixed([1.3, 0.65, 0.65, 0.7, 0.6, 3.0, 5.0, 7.0, 2.0, 4.5, 5.5]),
        fmin=_value(4.01377e-2),
    ),
    20: _Entry(
        name="Watson", rule=_watson, default_n=6,
        n_valid=lambda n: 2 <= n <= 31, n_text="2 <= n <= 31", m=lambda n: 31,
        start=np.zeros, fmin=_table({6: 2.28767e-3, 9: 1.39976e-6, 12: 4.72238e-10}),
    ),
    21: _Entry(
        name="Extended Rosenbrock", rule=_extended_rosenbrock, default_n=2,
        n_valid=lambda n: n >= 2 and n % 2 == 0, n_text="n even and >= 2", m=lambda n: n,
        start=lambda n: np.tile([-1.2, 1.0], n // 2), fmin=_value(0.0),
        xmin=lambda n, m: np.ones(n),
    ),
    22: _Entry(
        name="Extended Powell singular", rule=_extended_powell, default_n=4,
        n_valid=lambda n: n >= 4 and n % 4 == 0, n_text="n a multiple of 4", m=lambda n: n,
        start=lambda n: np.tile([3.0, -1.0, 0.0, 1.0], n // 4), fmin=_value(0.0),
        xmin=lambda n, m: np.zeros(n),
    ),
    23: _Entry(
        name="Penalty function I", rule=_penalty1, default_n=4, m=lambda n: n + 1,
        start=lambda n: np.arange(1.0, n + 1), fmin=_table({4: 2.24997e-5, 10: 7.08765e-5}),
    ),
    24: _Entry(
        name="Penalty function II", rule=_penalty2, default_n=4, m=lambda n: 2 * n,
        start=lambda n: np.full(n, 0.5), fmin=_table({4: 9.37629e-6, 10: 2.93660e-4}),
    ),
    25: _Entry(
        name="Variably dimensioned", rule=_variably_dimensioned, default_n=10,
        m=lambda n: n + 2, start=lambda n: 1.0 - np.arange(1, n + 1) / n, fmin=_value(0.0),
        xmin=lambda n, m: np.ones(n),
    ),
    26: _Entry(
        name="Trigonometric", rule=_trigonometric, default_n=10, m=lambda n: n,
        start=lambda n: np.full(n, 1.0 / n), fmin=_value(0.0),
        xmin=lambda n, m: np.zeros(n),  # evident zero; the paper states only f = 0
    ),
    27: _Entry(
        name="Brown almost-linear", rule=_brown_almost_linear, default_n=10, m=lambda n: n,
        start=lambda n: np.full(n, 0.5), fmin=_value(0.0), xmin=lambda n, m: np.ones(n),
    ),
    28: _Entry(
        name="Discrete boundary value", rule=_discrete_boundary_value, default_n=10,
        m=lambda n: n, start=lambda n: _grid(n)[1] * (_grid(n)[1] - 1.0), fmin=_value(0.0),
    ),
    29: _Entry(
        name="Discrete integral equation", rule=_discrete_integral_equation, default_n=10,
        m=lambda n: n, start=lambda n: _grid(n)[1] * (_grid(n)[1] - 1.0), fmin=_value(0.0),
    ),
    30: _Entry(
        name="Broyden tridiagonal", rule=_broyden_tridiagonal, default_n=10, m=lambda n: n,
        start=lambda n: np.full(n, -1.0), fmin=_value(0.0),
    ),
    31: _Entry(
        name="Broyden banded", rule=_broyden_banded, default_n=10, m=lambda n: n,
        start=lambda n: np.full(n, -1.0), fmin=_value(0.0),
    ),
    32: _Entry(
        name="Linear function - full rank", rule=_linear_full_rank, default_n=5,
        default_m=lambda n: 2 * n, m_valid=lambda n, m: m >= n, m_text="m >= n",
        start=np.ones, fmin=lambda n, m: float(m - n), xmin=lambda n, m: np.full(n, -1.0),
    ),
    33: _Entry(
        name="Linear function - rank 1", rule=_linear_rank1, default_n=5,
        default_m=lambda n: 2 * n, m_valid=lambda n, m: m >= n, m_text="m >= n",
        start=np.ones, fmin=lambda n, m: m * (m - 1) / (2.0 * (2 * m + 1)),
        xmin=lambda n, m: _rank1_minimizer(np.arange(1.0, n + 1), 3.0 / (2 * m + 1)),
    ),
    34: _Entry(
        name="Linear function - rank 1 with zero columns and rows", rule=_linear_rank1_zero,
        default_n=5, n_valid=lambda n: n >= 3, n_text="n >= 3",
        default_m=lambda n: 2 * n, m_valid=lambda n, m: m >= n, m_text="m >= n",
        start=np.ones, fmin=lambda n, m: (m**2 + 3 * m - 6) / (2.0 * (2 * m - 3)),
        xmin=lambda n, m: _rank1_minimizer(
            np.concatenate([[0.0], np.arange(2.0, n), [0.0]]), 3.0 / (2 * m - 3)
        ),
    ),
    35: _Entry(
        name="Chebyquad", rule=_chebyquad, default_n=8,
        default_m=lambda n: n, m_valid=lambda n, m: m >= n, m_text="m >= n",
        start=lambda n: np.arange(1, n + 1) / (n + 1),
        fmin=lambda n, m: _CHEBYQUAD_FMIN.get(n) if m == n else None,
    ),
}  # fmt: skip

# Problem 35, m = n: the values the paper reports (the n = 10 value is the minimum reached from the
# standard start; lower minima exist for that n).
_CHEBYQUAD_FMIN = {1: 0.0, 2: 0.0, 3: 0.0, 4: 0.0, 5: 0.0, 6: 0.0, 7: 0.0,
                   8: 3.51687e-3, 9: 0.0, 10: 6.50395e-3}  # fmt: skip


def _whole_number(value: object, label: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer):
        raise ProblemError(f"{label} must be an integer, got {value!r}")
    return int(value)


def _sizes(number: int, entry: _Entry, n: int | None, m: int | None) -> tuple[int, int]:
    """Resolve and check (n, m) for one problem."""
    if entry.n is not None:
        if n is not None and n != entry.n:
            raise ProblemError(f"n must be {entry.n} for problem {number}, got {n!r}")
        n = entry.n
    elif n is None:
        n = entry.default_n
    elif not entry.n_valid(n):
        raise ProblemError(f"n must satisfy {entry.n_text} for problem {number}, got {n!r}")
    if entry.m is not None:
        fixed_m = entry.m(n)
        if m is not None and m != fixed_m:
            raise ProblemError(f"m must be {fixed_m} for problem {number} with n = {n}, got {m!r}")
        return n, fixed_m
    if m is None:
        return n, entry.default_m(n)
    if not entry.m_valid(n, m):
        raise ProblemError(f"m must satisfy {entry.m_text} for problem {number}, got {m!r}")
    return n, m


def problem(number: int, n: int | None = None, m: int | None = None) -> TestProblem:
    """Return problem `number` (1 to 35) of Moré, Garbow and Hillstrom (1981) as a `TestProblem`.

    Fixed-size problems accept only their own n.  The number of residuals m is fixed by n except
    for problems 6, 11, 12, 16 and 18 (defaults 10, 99, 10, 20, 13, the sizes of the reported
    values) and 32–35 (m >= n; default m = 2n for 32–34, m = n for 35).  Variable-size problems
    default to the sample dimensions of Algorithm 566 [2]: Watson n = 6, extended Rosenbrock 2,
    extended Powell 4, penalty functions 4, problems 25–31 n = 10, linear functions n = 5,
    Chebyquad n = 8.  `fmin` and `xmin` are None for a size the paper reports nothing for.

    Examples
    --------
    >>> watson = problem(20, n=9)
    >>> watson.m, watson.fmin
    (31, 1.39976e-06)

    Raises
    ------
    ProblemError
        If `number` is not 1 to 35, or `n` or `m` is not a valid size for that problem.
    """
    number = _whole_number(number, "number")
    if number not in _ENTRIES:
        raise ProblemError(f"number must be 1 to 35, got {number!r}")
    n = None if n is None else _whole_number(n, "n")
    m = None if m is None else _whole_number(m, "m")
    entry = _ENTRIES[number]
    n, m = _sizes(number, entry, n, m)
    return TestProblem(
        number=number,
        name=entry.name,
        n=n,
        m=m,
        start=entry.start(n),
        fmin=entry.fmin(n, m),
        xmin=entry.xmin(n, m),
        rule=entry.rule,
    )


def _catalogue_n(entry: _Entry, max_n: int) -> int | None:
    if entry.n is not None:
        return entry.n if entry.n <= max_n else None
    if entry.default_n <= max_n:
        return entry.default_n
    return next((k for k in range(max_n, 0, -1) if entry.n_valid(k)), None)


def catalogue(max_n: int = 12) -> list[TestProblem]:
    """Return one instance of each problem with n <= `max_n`, in the paper's order, for benchmarks.

    Each problem comes at its default size (see `problem`); a variable-size problem whose default
    exceeds `max_n` comes at the largest valid n <= `max_n`, and a fixed-size problem larger than
    `max_n` (Osborne 2 has n = 11) is left out.

    Raises
    ------
    ProblemError
        If `max_n` is not a positive integer.
    """
    max_n = _whole_number(max_n, "max_n")
    if max_n < 1:
        raise ProblemError(f"max_n must be at least 1, got {max_n!r}")
    chosen = []
    for number, entry in _ENTRIES.items():
        n = _catalogue_n(entry, max_n)
        if n is not None:
            chosen.append(problem(number, n))
    return chosen
