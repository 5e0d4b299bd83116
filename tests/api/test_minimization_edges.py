"""Numeric edge cases of the objective: each gets a clear, documented answer (analytic checks)."""

from __future__ import annotations

import math
import time

import numpy as np
import pytest

import directional as dl


def test_a_constant_objective_converges_at_once():
    # three cycles of two line searches: the first two, at the coarse resolution of the start,
    # only make the next one finer (21 evaluations; two cycles and 17 before issue 14)
    sol = dl.minimize(lambda x: 1.0, [1.0, 2.0], check=False)
    assert sol.stop is dl.Stop.CONVERGED and sol.evaluations <= 21
    assert list(sol.point) == [1.0, 2.0]


def test_minus_infinity_stops_with_a_message():
    sol = dl.minimize(lambda x: -math.inf if x[0] < 0 else x[0], [1.0, 2.0], check=False)
    assert sol.stop is dl.Stop.STALLED
    assert "unbounded below" in sol.reason


def test_a_linear_objective_is_reported_as_unbounded_not_looped_on():
    sol = dl.minimize(lambda x: x[0] + x[1], [1.0, 2.0], check=False)
    assert sol.stop is dl.Stop.STALLED
    assert "unbounded below" in sol.reason and sol.evaluations < 200


def test_a_minimum_at_infinity_is_reported():
    # 1 / (1 + x^2) decreases to 0 as |x| grows: no finite minimizer (analytic).
    sol = dl.minimize(lambda x: 1 / (1 + x[0] ** 2) + (x[1] - 1) ** 2, [1.0, 2.0], check=False)
    assert sol.stop is dl.Stop.STALLED and "infinity" in sol.reason
    assert sol.point[1] == pytest.approx(1.0, abs=1e-6)


@pytest.mark.parametrize("size", [1e300, 1e-300, 1.0])
def test_the_size_of_the_objective_does_not_matter(size):
    # Minimum at (3, -1) whatever the scale of the values (analytic).
    sol = dl.minimize(
        lambda x: size * ((x[0] - 3) ** 2 + (x[1] + 1) ** 2 + 1), [1.0, 2.0], check=False
    )
    assert sol.point == pytest.approx([3.0, -1.0], abs=1e-6)


@pytest.mark.parametrize("wrap", [np.array, int, np.float32, lambda v: np.array([v])])
def test_numpy_scalars_ints_and_single_element_arrays_are_numbers(wrap):
    sol = dl.minimize(lambda x: wrap(round(float(x @ x) * 1e6)), [1.0, 2.0], check=False)
    assert sol.value < 1.0


def test_a_discontinuous_objective_still_ends():
    sol = dl.minimize(lambda x: math.floor(x[0]) + abs(x[1]), [1.5, 2.0], check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.value <= 1.0 + 1e-6


def test_time_limit_stops_cleanly():
    started = time.monotonic()
    # 0.05 s per evaluation: the search needs more than the 4 evaluations 0.2 s allows
    sol = dl.minimize(lambda x: time.sleep(0.05) or float(x @ x), [1.0, 2.0], time_limit=0.2,
                      check=False)
    assert sol.stop is dl.Stop.BUDGET and "time limit" in sol.reason
    assert time.monotonic() - started < 2.0


def test_an_objective_failing_everywhere_but_the_start_stalls_with_the_reason():
    start = np.array([1.0, 2.0])

    def picky(x):
        if np.array_equal(x, start):
            return 5.0
        raise RuntimeError("mesh generation failed")

    sol = dl.minimize(picky, start, check=False)
    assert sol.stop is dl.Stop.STALLED
    assert sol.value == 5.0 and list(sol.point) == [1.0, 2.0]
    assert "mesh generation failed" in sol.reason
