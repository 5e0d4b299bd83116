"""Noisy objectives for the benchmarks: noise models that keep the true values, and test functions.

Two noise models wrap a smooth function; each draws a new random number at every call, from its
own seeded generator, so a run is deterministic given the seed and the order of the calls, and
each keeps the noise-free value of every point it was asked for (to judge a solver by what it
really reached, not by what the noise showed it).

- `RelativeNoise`: ``f(x) (1 + level ε)``, ε uniform on [-1, 1].  The relative level 1e-3 is
  that of the noisy problems of Moré & Wild (2009) (from memory, section and details not checked
  against the paper: there the factor is a deterministic oscillating function of x with values
  in [-1, 1], ``f(x) (1 + ε_f φ(x))`` with ``ε_f = 1e-3``).  Here ε is stochastic (a
  simulation whose noise changes from run to run), drawn anew at each evaluation, uniform on the
  same range (our choice).  At a zero minimum the noise vanishes with f.
- `GaussianNoise`: ``f(x) + σ ε``, ε standard normal: additive noise of known size.

The smooth functions of the Gaussian table (`smooth_functions`) are our own, each with a known
minimizer and minimum 0, chosen to have a well-determined curvature there (so that the right
verdict is "minimum" and "flat" is always wrong).

References
----------
.. [1] J. J. Moré and S. M. Wild, "Benchmarking derivative-free optimization algorithms",
   *SIAM Journal on Optimization* 20 (2009) 172-191.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

Function = Callable[[np.ndarray], float]


class _Noisy:
    """A smooth function behind noise: keeps the true value and the noisy value of each call.

    ``draw(rng)`` gives the random number of one call and ``perturb(f, ε)`` the noisy value.
    """

    def __init__(
        self,
        function: Function,
        seed: object,
        draw: Callable[[np.random.Generator], float],
        perturb: Callable[[float, float], float],
    ) -> None:
        self.function = function
        self.rng = np.random.default_rng(seed)
        self._draw = draw
        self._perturb = perturb
        self.true_values: list[float] = []  # noise-free value of each call, failures as +inf
        self.values: list[float] = []  # what the caller received, failures as +inf

    def __call__(self, x: np.ndarray) -> float:
        draw = float(self._draw(self.rng))  # before the call: a failure does not shift the stream
        try:
            true = float(self.function(np.asarray(x, dtype=float)))
        except Exception:
            self.true_values.append(math.inf)
            self.values.append(math.inf)
            raise
        noisy = self._perturb(true, draw)
        self.true_values.append(true if math.isfinite(true) else math.inf)
        self.values.append(noisy if math.isfinite(noisy) else math.inf)
        return noisy


class RelativeNoise(_Noisy):
    """``f(x) (1 + level ε)`` with ε uniform on [-1, 1], drawn anew at each call.

    >>> noisy = RelativeNoise(lambda x: 2.0, level=1e-3, seed=0)
    >>> value = noisy(np.zeros(1))
    >>> abs(value - 2.0) <= 2e-3, noisy.true_values
    (True, [2.0])
    """

    def __init__(self, function: Function, *, level: float = 1e-3, seed: object = 0) -> None:
        self.level = float(level)
        super().__init__(function, seed, lambda rng: rng.uniform(-1.0, 1.0),
                         lambda f, e: f * (1.0 + self.level * e))


class GaussianNoise(_Noisy):
    """``f(x) + sigma ε`` with ε standard normal, drawn anew at each call.

    >>> noisy = GaussianNoise(lambda x: 0.0, sigma=1e-2, seed=1)
    >>> noisy(np.zeros(1)) != noisy(np.zeros(1)), noisy.true_values
    (True, [0.0, 0.0])
    """

    def __init__(self, function: Function, *, sigma: float, seed: object = 0) -> None:
        self.sigma = float(sigma)
        super().__init__(function, seed, lambda rng: rng.standard_normal(),
                         lambda f, e: f + self.sigma * e)


# ---------------------------------------------------------------------------- smooth functions


@dataclass(frozen=True, slots=True, kw_only=True)
class Smooth:
    """A smooth test function of our own with minimum 0 at ``minimizer``, and its noise size."""

    name: str
    formula: str  # the function, written out for the benchmark's notes
    function: Function = field(repr=False)
    start: np.ndarray
    minimizer: np.ndarray
    sigma: float  # standard deviation of the Gaussian noise added in the table

    @property
    def n(self) -> int:
        return self.minimizer.size

    def __call__(self, x: np.ndarray) -> float:
        return self.function(x)


def valley(x: np.ndarray) -> float:
    """Curved 3-variable valley ``(1 - x1)² + 10 (x2 - x1²)² + 10 (x3 + x2² / 2)²``.

    A Rosenbrock-like valley bent twice (our own): zero at (1, 1, -0.5) only.

    >>> valley(np.array([1.0, 1.0, -0.5]))
    0.0
    """
    return float((1.0 - x[0]) ** 2 + 10.0 * (x[1] - x[0] ** 2) ** 2
                 + 10.0 * (x[2] + 0.5 * x[1] ** 2) ** 2)


def rotation(n: int) -> np.ndarray:
    """A fixed orthogonal matrix mixing every coordinate: the product of two Householder
    reflections, built from integers so it does not depend on a random-number stream."""
    q = np.eye(n)
    for v in (np.arange(1.0, n + 1.0), np.cos(np.arange(n) + 1.0)):
        q = q @ (np.eye(n) - 2.0 * np.outer(v, v) / np.dot(v, v))
    return q


def quadratic_matrix(n: int, condition: float) -> np.ndarray:
    """``Q diag(λ) Qᵀ``: eigenvalues spaced geometrically from 1 to ``condition``, Q `rotation`."""
    q = rotation(n)
    eigenvalues = condition ** (np.arange(n) / (n - 1))
    return q @ np.diag(eigenvalues) @ q.T


def _quadratic(matrix: np.ndarray, minimizer: np.ndarray) -> Function:
    def f(x: np.ndarray) -> float:
        d = np.asarray(x, dtype=float) - minimizer
        return float(0.5 * d @ matrix @ d)

    return f


DECAY_TIMES = np.arange(10.0)  # sample times 0, 1, ..., 9 of the decay fit


def decay_fit(x: np.ndarray) -> float:
    """Sum of squares of ``a e^(-k t) - 2 e^(-t/2)`` at t = 0, ..., 9: the fit of a decay model
    to its own noise-free curve, zero at (a, k) = (2, 0.5) (our own calibration-like case)."""
    with np.errstate(over="ignore", invalid="ignore"):
        r = x[0] * np.exp(-x[1] * DECAY_TIMES) - 2.0 * np.exp(-0.5 * DECAY_TIMES)
        return float(np.dot(r, r))


LOGCOSH_WEIGHTS = np.array([1.0, 2.0, 4.0, 8.0])
LOGCOSH_CENTRE = np.array([0.5, -1.0, 1.5, 2.0])
LOGCOSH_ROTATION = rotation(4)


def logcosh_well(x: np.ndarray) -> float:
    """``Σ w_i log cosh(y_i)``, y = Q (x - c), w = (1, 2, 4, 8): quadratic near its minimum 0 at c,
    linear far from it, so parabolas fitted far away overshoot (our own)."""
    y = LOGCOSH_ROTATION @ (np.asarray(x, dtype=float) - LOGCOSH_CENTRE)
    # log cosh(y) = |y| + log1p(exp(-2|y|)) - log 2, without overflow
    a = np.abs(y)
    return float(np.dot(LOGCOSH_WEIGHTS, a + np.log1p(np.exp(-2.0 * a)) - math.log(2.0)))


def smooth_functions() -> list[Smooth]:
    """The functions of the smooth-plus-Gaussian table, in the order of the table."""
    six = np.array([1.0, -1.0, 1.0, -1.0, 1.0, -1.0])
    ten = np.linspace(-1.0, 1.0, 10)
    return [
        Smooth(name="curved valley", formula="(1 − x1)² + 10 (x2 − x1²)² + 10 (x3 + x2²/2)²",
               function=valley, start=np.array([-1.2, 1.0, 1.0]),
               minimizer=np.array([1.0, 1.0, -0.5]), sigma=1e-3),
        Smooth(name="quadratic, condition 1e2",
               formula="½ (x − x*)ᵀ A (x − x*), eigenvalues 1 to 1e2 geometric, "
               "x* = (1, −1, 1, −1, 1, −1)",
               function=_quadratic(quadratic_matrix(6, 1e2), six), start=np.zeros(6),
               minimizer=six, sigma=1e-2),
        Smooth(name="decay fit", formula="Σ_t (a e^(−k t) − 2 e^(−t/2))², t = 0, …, 9",
               function=decay_fit, start=np.array([1.0, 1.0]),
               minimizer=np.array([2.0, 0.5]), sigma=1e-3),
        Smooth(name="log-cosh well", formula="Σ w_i log cosh((Q (x − c))_i), w = (1, 2, 4, 8), "
               "c = (0.5, −1, 1.5, 2)",
               function=logcosh_well, start=np.zeros(4), minimizer=LOGCOSH_CENTRE.copy(),
               sigma=1e-2),
        Smooth(name="quadratic, condition 1e3",
               formula="½ (x − x*)ᵀ A (x − x*), eigenvalues 1 to 1e3 geometric, "
               "x* evenly spaced in [−1, 1]",
               function=_quadratic(quadratic_matrix(10, 1e3), ten), start=np.zeros(10),
               minimizer=ten, sigma=1e-3),
    ]
